"""Coverage of the joint fit of several runs (``fringe fit RUN1 RUN2 ...``; issue 16).

Many small simulated joint campaigns with a known injected truth are written and fitted jointly
exactly as ``fringe fit`` does (:func:`fringe.fit.joint.fit_joint`), and combined from the runs'
own results as ``fringe combine`` does (:func:`fringe.fit.joint.combine_parts`, marginal
route). Two configurations, each campaign two runs of half a day (2 s samples, 60 s turns):

* ``two-sites``: run 1 a rotating cavity pair at 47.62 deg N (the invented Kestrel Fen optics
  cellar), run 2 a rotating Michelson at 31.5 deg S (the invented Sandveld hut), 10 days
  later;
* ``tilted``: both runs at Kestrel Fen, run 2 ten days later with the table axis tilted by
  (300, 150) microradian south, east (a levelling error the fit does not model: the signal's
  directions change by that order, 3e-4 of the signal), arms 60 deg apart and the table
  starting at azimuth 40 deg (the apparatus and its orientation vary).

The injected ke_* of each campaign are drawn from a normal law of standard deviation 3e-16
(truth seed). For every coefficient: the mean and standard deviation of the pulls (joint
estimate - truth) / joint sigma, the coverage of the 1 sigma and 1.96 sigma intervals (expected
68.27 % and 95.00 %, binomial scatter sqrt(p (1 - p) / N)), the mean ratio of the joint sigma
to the best single run's, and the largest |joint - combination| / sigma. Also the mean
Mahalanobis distance of the five (expected 5) and the fraction of campaigns whose runs'
agreement test gives p < 0.05 (expected 5 %).

Run (2 worker processes; raw records as JSON; Markdown printed, optionally written into a
document between ``<!-- joint-coverage:begin -->`` and ``<!-- joint-coverage:end -->``)::

    python validation/joint_coverage.py --out OUTDIR [--n 200] [--workers 2] [--seed 16]
        [--update-doc docs/validation.md]
"""

from __future__ import annotations

import argparse
import copy
import math
import sys
import tempfile
import time
import warnings
import zlib
from pathlib import Path

import numpy as np

KE = ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY", "ke_ZZ")
TRUTH_SIGMA = 3e-16              # spread of the injected ke_* (a few sigma of a joint campaign)
P1, P196 = 0.682689492137, 0.95   # 2 Phi(1) - 1, 2 Phi(1.96) - 1 (scipy.stats.norm)
CONFIGS = ("two-sites", "tilted")
BEGIN, END = "<!-- joint-coverage:begin -->", "<!-- joint-coverage:end -->"

# An invented laboratory, as in examples/cavity_pair.toml, shortened.
BASE = {
    "title": "joint coverage campaign (invented)",
    "site": {"name": "Kestrel Fen optics cellar (invented)", "latitude_deg": 47.62,
             "longitude_deg": 11.38, "height_m": 610.0},
    "campaign": {"start_utc": "2027-02-03T00:00:00Z", "duration_days": 0.5,
                 "sample_interval_s": 2.0},
    "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.82e14, "path_separation_deg": 90.0,
                  "units": "Hz"},
    "turntable": {"motion": "continuous", "period_s": 60.0, "sense": "ccw",
                  "start_azimuth_deg": 0.0},
    "theory": {"name": "sme"},
    "noise": {"white_fm_adev_1s": 2e-15},
}
LATER = {"campaign": {"start_utc": "2027-02-13T06:00:00Z", "duration_days": 0.5,
                      "sample_interval_s": 2.0}}
SECOND = {
    "two-sites": {**LATER,
                  "site": {"name": "Sandveld hut (invented)", "latitude_deg": -31.5,
                           "longitude_deg": 19.2, "height_m": 300.0},
                  "apparatus": {"kind": "michelson", "arm_length_m": 10.0,
                                "wavelength_m": 633e-9, "units": "fringe"},
                  "noise": {"white_fm_adev_1s": 6e-8}},      # fringes (invented level)
    "tilted": {**LATER,
               "turntable": {"motion": "continuous", "period_s": 60.0, "sense": "ccw",
                             "start_azimuth_deg": 40.0, "tilt_south_urad": 300.0,
                             "tilt_east_urad": 150.0},
               "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.82e14,
                             "path_separation_deg": 60.0, "units": "Hz"}},
}


def seeds(config: str, index: int, study_seed: int) -> tuple[int, int, int]:
    """(run 1, run 2, truth) seeds from (study seed, configuration, index) (SeedSequence)."""
    ss = np.random.SeedSequence([study_seed, zlib.crc32(config.encode()), index])
    a, b, c = (int(x) for x in ss.generate_state(3))
    return a, b, c


def docs_of(config: str, truth: dict) -> list[dict]:
    """The two runs' scenarios (parsed-TOML form) with the campaign's truth."""
    first = copy.deepcopy(BASE)
    second = copy.deepcopy(BASE)
    second.update(copy.deepcopy(SECOND[config]))
    for d in (first, second):
        d["coefficients"] = dict(truth)
    return [first, second]


def run_campaign(job: tuple) -> dict:
    """Simulate and fit one joint campaign; job = (config, index, study seed)."""
    from fringe.fit.joint import combine_parts, fit_joint
    from fringe.fit.settings import FitSettings
    from fringe.study.campaign import simulate_run

    config, index, study_seed = job
    s1, s2, st = seeds(config, index, study_seed)
    rng = np.random.default_rng(st)
    truth = {n: float(rng.normal(0.0, TRUTH_SIGMA)) for n in KE}
    out = {"config": config, "index": index, "seeds": [s1, s2, st], "truth": truth}
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="fringe-joint-") as tmp, \
            warnings.catch_warnings():
        warnings.simplefilter("ignore")
        paths = []
        for i, (doc, seed) in enumerate(zip(docs_of(config, truth), (s1, s2))):
            paths.append(str(Path(tmp) / f"run{i}.h5"))
            simulate_run(doc, f"joint:{config}", paths[-1], seed)
        joint = fit_joint(paths, FitSettings(free=KE), scratch_dir=tmp)
    from fringe.fit.joint import RunPart

    parts = [RunPart(r.path, r.sha256, dict(r.site), dict(r.apparatus), r.epoch_utc, r.span_s,
                     r.units, r.n_turns, r.uncertainty, r.chi2_reduced, r.dof, r.likelihood)
             for r in joint.runs.runs]
    comb = combine_parts(parts, theory="sme", fixed={}, method="combination")
    out.update(
        value={n: e.value for n, e in joint.coefficients.items()},
        sigma={n: e.sigma for n, e in joint.coefficients.items()},
        cov=[list(r) for r in joint.covariance.matrix],
        alone=[{n: e.sigma for n, e in r.alone.items()} for r in joint.runs.runs],
        combine_minus_joint={n: (comb.coefficients[n].value - e.value) / e.sigma
                             for n, e in joint.coefficients.items()},
        agreement=dict(joint.runs.agreement), fit_s=time.perf_counter() - t0)
    return out


def _failed(job, reason) -> dict:
    return {"config": job[0], "index": job[1], "error": str(reason).splitlines()[0][:300]}


def tables(records: list[dict]) -> str:
    """Markdown tables of the statistics per configuration."""
    lines = []
    for config in CONFIGS:
        recs = [r for r in records if r.get("config") == config and "error" not in r]
        n = len(recs)
        if not n:
            continue
        z = np.array([[(r["value"][k] - r["truth"][k]) / r["sigma"][k] for k in KE]
                      for r in recs])
        d2 = [float(np.subtract([r["value"][k] for k in KE], [r["truth"][k] for k in KE])
                    @ np.linalg.solve(np.array(r["cov"]), np.subtract(
                        [r["value"][k] for k in KE], [r["truth"][k] for k in KE])))
              for r in recs]
        ratio = np.array([[r["sigma"][k] / min(a[k] for a in r["alone"]) for k in KE]
                          for r in recs])
        dcomb = np.array([[abs(r["combine_minus_joint"][k]) for k in KE] for r in recs])
        p_small = np.mean([r["agreement"]["p_value"] < 0.05 for r in recs])
        b1, b2 = math.sqrt(P1 * (1 - P1) / n), math.sqrt(P196 * (1 - P196) / n)
        lines += [f"**{config}** ({n} joint campaigns; "
                  f"{sum(1 for r in records if r.get('config') == config and 'error' in r)} "
                  "failed)", "",
                  "| coefficient | pull mean (± 1/√N) | pull std | within 1σ (68.3 %) | "
                  "within 1.96σ (95.0 %) | σ joint / best single σ | max abs(combine − joint)/σ |",
                  "|---|---|---|---|---|---|---|"]
        for j, k in enumerate(KE):
            lines.append(f"| {k} | {z[:, j].mean():+.3f} ± {1 / math.sqrt(n):.3f} | "
                         f"{z[:, j].std(ddof=1):.3f} | "
                         f"{100 * np.mean(np.abs(z[:, j]) <= 1):.1f} % ± {100 * b1:.1f} | "
                         f"{100 * np.mean(np.abs(z[:, j]) <= 1.96):.1f} % ± {100 * b2:.1f} | "
                         f"{ratio[:, j].mean():.3f} | {dcomb[:, j].max():.1e} |")
        lines += ["", f"Mean Mahalanobis distance of the five: {np.mean(d2):.3f} (expected 5, "
                  f"± {math.sqrt(10 / n):.2f}); runs' agreement p < 0.05 in "
                  f"{100 * p_small:.1f} % of the campaigns (expected 5 %, ± "
                  f"{100 * math.sqrt(0.05 * 0.95 / n):.1f}).", ""]
    return "\n".join(lines)


def update_doc(path: Path, text: str) -> None:
    """Replace the text between the markers in ``path`` (whole or not at all)."""
    from fringe.io.atomic import write_text_atomic

    doc = path.read_text(encoding="utf-8")
    a, b = doc.index(BEGIN) + len(BEGIN), doc.index(END)
    write_text_atomic(path, doc[:a] + "\n" + text + "\n" + doc[b:], overwrite=True)


def main(argv=None) -> int:
    """Command line of the script (see module docstring)."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", required=True, help="directory for joint_coverage.json")
    ap.add_argument("--n", type=int, default=200, help="campaigns per configuration")
    ap.add_argument("--workers", type=int, default=2, help="worker processes")
    ap.add_argument("--seed", type=int, default=16, help="study seed")
    ap.add_argument("--configs", default=",".join(CONFIGS), help="configurations")
    ap.add_argument("--update-doc", default=None, help="document with the markers")
    args = ap.parse_args(argv)
    from fringe.io.atomic import write_json_atomic
    from fringe.study.engines import map_tasks

    jobs = [(c, i, args.seed) for c in args.configs.split(",") for i in range(args.n)]
    t0 = time.perf_counter()
    records = map_tasks(run_campaign, jobs, _failed, workers=args.workers)
    wall = time.perf_counter() - t0
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    write_json_atomic(out / "joint_coverage.json", {"records": records, "wall_s": wall,
                                                    "argv": sys.argv[1:]}, overwrite=True)
    text = tables(records) + (f"\nWall time {wall / 60:.1f} min for {len(jobs)} joint "
                              f"campaigns on {args.workers} worker processes.\n")
    print(text)
    if args.update_doc:
        update_doc(Path(args.update_doc), text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
