"""Statistical validation of ``fringe fit``: coverage, null tests and efficiency.

Many small simulated campaigns with a known injected truth are written and fitted with the
study library behind ``fringe study`` (:mod:`fringe.study.campaign`: ``simulate_run``,
``fit_record``, ``scramble_turns``; :func:`fringe.study.engines.map_tasks` runs them, in a pool
of spawned processes that a failing campaign does not stop or hang), exactly as a user would.
For every coefficient the study reports the coverage of the reported 1 sigma and 1.96 sigma
intervals, the mean and standard deviation of the pulls (estimate - truth)/sigma, the
efficiency (white-noise Cramer-Rao sigma / reported sigma, the result's ``efficiency``) and the
ratio of the scatter of the estimates to the reported sigma.
Null tests: campaigns with nothing injected, and campaigns with a real signal whose sidereal
phase is scrambled (turns permuted). A constant shift of the analysis epoch is also run: it
rotates the sidereal phase by a constant, which maps the signal onto other coefficients instead
of removing it (not a null; see ``docs/validation.md``).

Run (2 worker processes, raw results as JSON, Markdown tables printed and optionally written
into a document between the markers ``<!-- validation:begin -->``/``<!-- validation:end -->``)::

    python validation/run_validation.py --out OUTDIR [--n 300] [--n-null 1000]
        [--configs sme-white,rms] [--workers 2] [--seed 20270203] [--update-doc docs/validation.md]
    python validation/run_validation.py --from-json OUTDIR/validation_results.json --update-doc ...

Expected values: coverage 2 Phi(1) - 1 = 68.27 % and 2 Phi(1.96) - 1 = 95.00 % (normal
distribution, scipy.stats.norm); their scatter for N campaigns is binomial,
sqrt(p (1 - p) / N). Every campaign's seeds derive from (study seed, configuration, index)
through numpy.random.SeedSequence, so a run is reproducible.
"""

from __future__ import annotations

import argparse
import copy
import datetime
import json
import math
import os
import platform
import shutil
import sys
import tempfile
import time
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

CARRIER_HZ = 2.82e14
SIDEREAL_DAY_S = 86164.0905          # mean sidereal day, s (IERS Conventions 2010, ch. 1)
KE = ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY", "ke_ZZ")
CQ = ("cq_XY", "cq_XZ", "cq_YZ", "cq_XXmYY", "cq_ZZ")
SUN = ("sun_vX_kms", "sun_vY_kms", "sun_vZ_kms")
MODULATED = KE[:4]                   # ke_ZZ lives in C0 (docs/references.md [R-lab-fourier])

# An invented laboratory, as in examples/cavity_pair.toml.
BASE_DOC = {
    "title": "validation campaign (invented)",
    "site": {"name": "Kestrel Fen optics cellar (invented)", "latitude_deg": 47.62,
             "longitude_deg": 11.38, "height_m": 610.0},
    "campaign": {"start_utc": "2027-02-03T00:00:00Z", "duration_days": 1.5,
                 "sample_interval_s": 1.0},
    "apparatus": {"kind": "cavity-pair", "carrier_hz": CARRIER_HZ, "path_separation_deg": 90.0,
                  "units": "Hz"},
    "turntable": {"motion": "continuous", "period_s": 45.0, "sense": "ccw",
                  "start_azimuth_deg": 0.0},
    "theory": {"name": "sme"},
    "noise": {"white_fm_adev_1s": 1.2e-15},
}


@dataclass(frozen=True)
class Fit:
    """One fit of each campaign: a label, FitSettings and DemodSettings keywords, and a transform
    of the run file before fitting (None, "scramble": permute whole turns, "epoch-shift": move
    the epoch)."""

    label: str
    settings: dict = field(default_factory=dict)
    transform: str | None = None
    demod: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Config:
    """A validation configuration.

    ``truth`` maps each injected coefficient to (centre, half width, mode): "uniform" draws
    centre + U(-w, w) per campaign, "sign" draws centre + w x (random sign). ``doc`` overrides
    sections of BASE_DOC (whole sections are replaced, campaign/turntable are merged).
    """

    name: str
    label: str
    kind: str                         # coverage | null | scramble | epoch-shift
    theory: str
    names: tuple
    truth: dict
    doc: dict = field(default_factory=dict)
    fits: tuple = (Fit("reduced-chi2"),)
    n_default: int = 400
    #: "simulate": one run file from the simulator; "two-device": the invented counter +
    #: encoder record of examples/two_device (gate averaging, own clocks), imported from its
    #: two CSV files with fringe.io.csvimport.import_csv before the fit.
    pipeline: str = "simulate"


SIGN = "sign"
U = "uniform"
CONFIGS = {c.name: c for c in (
    Config("sme-white", "(a) SME ke_*, white FM", "coverage", "sme", KE,
           {n: (0.0, 4e-17, U) for n in KE}),
    Config("sme-imperfect", "(b) SME ke_*, white FM + drift, gaps, glitches, dropouts",
           "coverage", "sme", KE, {n: (0.0, 4e-17, U) for n in KE},
           doc={"systematics": {"drift_per_day": 2e-13, "drift_per_day2": -5e-15,
                                "glitches_per_day": 6.0, "glitch_size": 5e-13,
                                "gaps_per_day": 3.0, "gap_length_s": 1800.0,
                                "dropout_fraction": 0.01}}),
    Config("rms", "(c) RMS rms_mm (CMB frame), white FM", "coverage", "rms", ("rms_mm",),
           {"rms_mm": (1e-10, 2e-11, U)}, doc={"theory": {"name": "rms"}}),
    Config("clock", "(d) clock cq_*, white noise (Hz)", "coverage", "clock", CQ,
           {n: (0.0, 4e-20, U) for n in CQ},
           doc={"theory": {"name": "clock"},
                "apparatus": {"kind": "clock", "sensitivity_hz": 1e15, "units": "Hz"},
                "noise": {"white_fm_adev_1s": 1e-3}}),
    Config("medium", "(e) classical medium, Sun velocity (nonlinear)", "coverage", "medium",
           SUN, {n: (0.0, 30.0, U) for n in SUN},
           doc={"theory": {"name": "medium"}, "noise": {"white_fm_adev_1s": 1e-9}},
           n_default=250),
    # near null: v_sun = -v_orbit at the middle of the 1.5-day campaign (fringe.frames
    # earth_velocity_beta, pyerfa epv00, at 2027-02-03T18:00Z; derived, rounded to 0.01 km/s)
    # plus U(-1, 1) km/s per component, so the lab moves through the medium at ~0.3-2 km/s
    Config("medium-null", "(e') classical medium, near null (lab speed ~1 km/s)", "coverage",
           "medium", SUN, {n: (c, 1.0, U) for n, c in zip(SUN, (21.82, 19.19, 8.32))},
           doc={"theory": {"name": "medium"}, "noise": {"white_fm_adev_1s": 1e-9}},
           n_default=100),
    Config("sme-flicker", "(f) SME ke_*, flicker-FM dominated", "coverage", "sme", KE,
           {n: (0.0, 8e-17, U) for n in KE},
           doc={"campaign": {"duration_days": 2.0},
                "noise": {"white_fm_adev_1s": 2e-16, "flicker_fm_adev": 1e-15}},
           fits=(Fit("reduced-chi2"),
                 Fit("bootstrap", {"uncertainty": "bootstrap", "bootstrap_days": 0.25}),
                 Fit("reduced-chi2, quadratic drift", demod={"drift": "quadratic"}))),
    Config("sme-randomwalk", "(g) SME ke_*, random-walk-FM dominated", "coverage", "sme", KE,
           {n: (0.0, 2e-17, U) for n in KE},
           doc={"noise": {"white_fm_adev_1s": 2e-16, "random_walk_fm_adev_1s": 1e-16}},
           fits=(Fit("reduced-chi2"),
                 Fit("reduced-chi2, quadratic drift", demod={"drift": "quadratic"})),
           n_default=250),
    Config("sme-short-turns", "(h) SME ke_*, white FM, 20 s turns (20 samples, 14 dof per turn)",
           "coverage", "sme", KE, {n: (0.0, 4e-17, U) for n in KE},
           doc={"turntable": {"period_s": 20.0}}),
    Config("stepped", "(i) SME ke_*, white FM, stepped table (16 marks, 8 s dwell + 2 s move), "
           "0.5 d", "coverage", "sme", KE, {n: (0.0, 4e-17, U) for n in KE},
           doc={"campaign": {"duration_days": 0.5},
                "turntable": {"motion": "stepped", "step_deg": 22.5, "dwell_s": 8.0,
                              "move_s": 2.0}}, n_default=200),
    Config("reversing", "(j) SME ke_*, white FM, reversing table (alternate 60 s turns), 0.5 d",
           "coverage", "sme", KE, {n: (0.0, 4e-17, U) for n in KE},
           doc={"campaign": {"duration_days": 0.5},
                "turntable": {"motion": "reversing", "period_s": 60.0}}, n_default=200),
    Config("swinging", "(k) SME ke_*, white FM, swinging table (300° sweeps of 50 s), 0.5 d",
           "coverage", "sme", KE, {n: (0.0, 4e-17, U) for n in KE},
           doc={"campaign": {"duration_days": 0.5},
                "turntable": {"motion": "swinging", "arc_deg": 300.0, "sweep_s": 50.0}},
           n_default=200),
    Config("two-device", "(l) SME ke_*, counter (overlapping 2 s gates, stamped at the end) + "
           "encoder (own clock and rate), 30 s turns, 0.5 d, two-device import",
           "coverage", "sme", KE, {n: (0.0, 1e-16, U) for n in KE}, n_default=200,
           pipeline="two-device"),
    Config("null", "null: nothing injected (SME, white FM)", "null", "sme", KE,
           {n: (0.0, 0.0, U) for n in KE}, n_default=1500),
    Config("scramble", "null: ~8 sigma injected, whole turns permuted in time", "scramble",
           "sme", KE, {"ke_XY": (0.0, 6e-17, SIGN), "ke_XZ": (0.0, 8e-17, SIGN),
                       "ke_YZ": (0.0, 8e-17, SIGN), "ke_XXmYY": (0.0, 1.2e-16, SIGN),
                       "ke_ZZ": (0.0, 1.2e-16, SIGN)},
           doc={"campaign": {"duration_s": 2 * SIDEREAL_DAY_S}},
           fits=(Fit("reduced-chi2"), Fit("scrambled", transform="scramble")), n_default=300),
    Config("epoch-shift", "not a null: ~8 sigma injected, epoch moved by months + a fraction "
           "of a day", "epoch-shift", "sme", KE,
           {"ke_XY": (0.0, 6e-17, SIGN), "ke_XZ": (0.0, 8e-17, SIGN),
            "ke_YZ": (0.0, 8e-17, SIGN), "ke_XXmYY": (0.0, 1.2e-16, SIGN),
            "ke_ZZ": (0.0, 1.2e-16, SIGN)},
           doc={"campaign": {"duration_s": 2 * SIDEREAL_DAY_S}},
           fits=(Fit("reduced-chi2"), Fit("epoch-shifted", transform="epoch-shift")),
           n_default=60),
)}


# ------------------------------------------------------------------------------------------
# One campaign
# ------------------------------------------------------------------------------------------

def campaign_seeds(study_seed: int, config: str, index: int) -> tuple[int, int, int]:
    """(simulation, truth, transform) seeds of one campaign (numpy SeedSequence)."""
    key = zlib.crc32(config.encode())
    s = np.random.SeedSequence([int(study_seed), key, int(index)]).generate_state(3)
    return int(s[0]), int(s[1]), int(s[2])


def draw_truth(cfg: Config, rng: np.random.Generator) -> dict:
    out = {}
    for name, (centre, width, mode) in cfg.truth.items():
        out[name] = centre + (width * rng.choice([-1.0, 1.0]) if mode == SIGN
                              else rng.uniform(-width, width))
    return out


def scenario_doc(cfg: Config, truth: dict, days: float | None = None) -> dict:
    doc = copy.deepcopy(BASE_DOC)
    for section, value in cfg.doc.items():
        if section == "turntable" and "motion" in value:     # another motion: its own fields
            doc[section] = copy.deepcopy(value)
        elif section in ("campaign", "turntable"):
            if "duration_s" in value:
                doc[section].pop("duration_days", None)
            doc[section].update(value)
        else:
            doc[section] = copy.deepcopy(value)
    if days is not None:
        doc["campaign"].pop("duration_s", None)
        doc["campaign"]["duration_days"] = days
    doc["coefficients"] = dict(truth)
    return doc


def shift_epoch(src: str, dst: str, rng: np.random.Generator) -> float:
    """Copy a run file with samples/time.epoch_utc moved by 30-365 days plus a random
    fraction of a day; returns the shift in seconds."""
    import h5py

    shutil.copyfile(src, dst)
    shift_s = 86400.0 * (int(rng.integers(30, 366)) + float(rng.uniform(0.0, 1.0)))
    with h5py.File(dst, "r+") as f:
        attrs = f["samples/time"].attrs
        old = attrs["epoch_utc"]
        old = old.decode() if isinstance(old, bytes) else str(old)
        t0 = datetime.datetime.strptime(old.replace("Z", ""), "%Y-%m-%dT%H:%M:%S")
        new = t0 + datetime.timedelta(seconds=round(shift_s, 6))
        attrs["epoch_utc"] = new.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    return shift_s


def sidereal_rotation_rad(epoch_a: str, epoch_b: str, lon_deg: float) -> float:
    """phi_b(0) - phi_a(0): the constant sidereal phase change of an epoch shift, rad."""
    from fringe.frames import Epoch, sidereal_angle_rad

    lon = math.radians(lon_deg)
    return float(sidereal_angle_rad(Epoch(epoch_b), [0.0], lon)[0]
                 - sidereal_angle_rad(Epoch(epoch_a), [0.0], lon)[0])


def rotate_ke(v: dict, delta_rad: float) -> dict:
    """ke_* that a fit in phi' = phi + delta reports for a signal of ``v`` in phi.

    From the C10 table (docs/references.md [R-lab-fourier]): (C_s1, C_c1) ~ -sc (K^YZ, K^XZ) and
    (B_s1, B_c1) ~ s (K^XZ, -K^YZ) rotate by delta; (C_s2, C_c2) ~ (K^XY, (K^XX - K^YY)/2)
    rotate by 2 delta; C0 (K^ZZ) is unchanged (derived).
    """
    c, s = math.cos(delta_rad), math.sin(delta_rad)
    c2, s2 = math.cos(2 * delta_rad), math.sin(2 * delta_rad)
    d = v["ke_XXmYY"] / 2
    return {"ke_YZ": v["ke_YZ"] * c + v["ke_XZ"] * s, "ke_XZ": v["ke_XZ"] * c - v["ke_YZ"] * s,
            "ke_XY": v["ke_XY"] * c2 + d * s2, "ke_XXmYY": 2 * (d * c2 - v["ke_XY"] * s2),
            "ke_ZZ": v["ke_ZZ"]}


def reorient_ke(v: dict, delta_rad: float, q_a: np.ndarray, q_b: np.ndarray) -> dict:
    """ke_* that a fit with the shifted epoch reports, including the Earth orientation.

    The lab turns about the pole of the celestial-to-intermediate matrix Q of each epoch
    (docs/references.md [R-time-earth-orientation]): the data carry R3(phi) Q_a K Q_aᵀ R3ᵀ, the
    shifted fit models R3(phi + delta) Q_b K' Q_bᵀ R3ᵀ, so K' = M K Mᵀ with
    M = Q_bᵀ R3(-delta) Q_a (R3 the rotation of the axes about Z, as in ERFA). With
    Q_a = Q_b = 1 this is :func:`rotate_ke` (derived).
    """
    from fringe.conventions import components_from_traceless, traceless_from_components

    c, s = math.cos(delta_rad), math.sin(delta_rad)
    r3 = np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])       # R3(-delta)
    m = q_b.T @ r3 @ q_a
    k = traceless_from_components(v["ke_XY"], v["ke_XZ"], v["ke_YZ"], v["ke_XXmYY"],
                                  v["ke_ZZ"])
    comps = components_from_traceless(m @ k @ m.T)
    return {f"ke_{n}": float(comps[n]) for n in ("XY", "XZ", "YZ", "XXmYY", "ZZ")}


def orientation_at(epoch_utc: str, t_s: float) -> np.ndarray:
    """Celestial-to-intermediate matrix Q (3, 3) at ``t_s`` seconds after ``epoch_utc``."""
    from fringe.frames import Epoch, celestial_to_intermediate

    return celestial_to_intermediate(Epoch(epoch_utc), [t_s])[0]


def _true_speeds(path: str, cols, truth: dict) -> dict:
    """The injected Sun speed and the largest lab speed (full, horizontal) over the accepted
    turns' mean times, km/s, as docs/fit.md defines the medium fit's derived speeds."""
    from fringe.constants import C_M_S
    from fringe.fit.run import setup_from_run

    setup, _ = setup_from_run(path, "medium")
    state = setup.frames(cols["t_mid_s"][cols["accepted"].astype(bool)])
    u = np.array([truth[n] for n in SUN])[None, :] + state.beta * C_M_S / 1e3
    h = np.einsum("nij,nj->ni", state.rotation[:, :2, :], u)
    return {"sun": float(np.linalg.norm([truth[n] for n in SUN])),
            "lab": float(np.linalg.norm(u, axis=1).max()),
            "horizontal": float(np.linalg.norm(h, axis=1).max())}


def _fit_record(path: str, cfg: Config, fit: Fit, truth: dict | None = None) -> dict:
    """One fit of a campaign through the study library (fringe.study.campaign.fit_record)."""
    from fringe.demodulate.settings import DemodSettings
    from fringe.fit.settings import FitSettings
    from fringe.study.campaign import fit_record

    def keep(res, cols):
        if res.derived is None or truth is None:
            return {}
        return {"derived": res.derived.to_dict(),
                "true_speeds": _true_speeds(path, cols, truth)}

    return fit_record(path, FitSettings(theory=cfg.theory, **fit.settings),
                      DemodSettings(**fit.demod), keep=keep)


def run_campaign(job: tuple, workdir: str | os.PathLike | None = None) -> dict:
    """Simulate and fit one campaign; job = (config name, index, study seed[, days]).

    The run files live in a temporary directory under ``workdir`` (default: the system's) and
    are deleted afterwards. ``days`` overrides the campaign length (days).
    """
    from fringe.experiment.scenario import scenario_from_dict
    from fringe.study.campaign import scramble_turns, simulate_run

    name, index, study_seed = job[:3]
    days = job[3] if len(job) > 3 else None
    cfg = CONFIGS[name]
    sim_seed, truth_seed, aux_seed = campaign_seeds(study_seed, name, index)
    truth = draw_truth(cfg, np.random.default_rng(truth_seed))
    if cfg.pipeline == "two-device":
        return two_device_campaign(cfg, index, sim_seed, truth, days, workdir)
    doc = scenario_doc(cfg, truth, days)
    sc = scenario_from_dict(doc, f"validation:{name}")
    out = {"config": name, "index": index, "seed": sim_seed, "truth": truth, "fits": {}}
    with tempfile.TemporaryDirectory(prefix="fringe-val-", dir=workdir) as tmp:
        run = str(Path(tmp) / "run.h5")
        t0 = time.perf_counter()
        summary = simulate_run(doc, f"validation:{name}", run, sim_seed)
        out["sim_s"] = time.perf_counter() - t0
        out["n_gaps"], out["n_glitches"] = summary["n_gaps"], summary["n_glitches"]
        rng = np.random.default_rng(aux_seed)
        for fit in cfg.fits:
            path, extra = run, {}
            if fit.transform == "scramble":
                path = str(Path(tmp) / "scrambled.h5")
                extra["n_turns_permuted"] = scramble_turns(run, path, rng)
            elif fit.transform == "epoch-shift":
                path = str(Path(tmp) / "shifted.h5")
                extra["shift_s"] = shift_epoch(run, path, rng)
            rec = _fit_record(path, cfg, fit, truth)
            rec.update(extra)
            out["fits"][fit.label] = rec
    if cfg.kind == "epoch-shift":
        base, sh = out["fits"]["reduced-chi2"], out["fits"]["epoch-shifted"]
        delta = sidereal_rotation_rad(base["epoch_utc"], sh["epoch_utc"],
                                      BASE_DOC["site"]["longitude_deg"])
        sh["delta_rad"] = delta
        t_mid = 0.5 * sc.duration_s
        sh["predicted"] = reorient_ke(base["value"], delta,
                                      orientation_at(base["epoch_utc"], t_mid),
                                      orientation_at(sh["epoch_utc"], t_mid))
    if cfg.theory == "medium":
        out["mirror"] = medium_mirror(sc, truth)
    return out


TWO_DEVICE_EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "two_device" / \
    "make_two_device_example.py"


def two_device_campaign(cfg: Config, index: int, seed: int, truth: dict, days: float | None,
                        workdir) -> dict:
    """One campaign of the two-device pipeline: write the counter and encoder logs of the
    invented example with this truth, import them as two devices, fit."""
    import importlib.util

    from fringe.io.csvimport import import_csv

    spec = importlib.util.spec_from_file_location("two_device_example", TWO_DEVICE_EXAMPLE)
    example = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(example)
    out = {"config": cfg.name, "index": index, "seed": seed, "truth": truth, "fits": {}}
    with tempfile.TemporaryDirectory(prefix="fringe-val-", dir=workdir) as tmp:
        t0 = time.perf_counter()
        got = example.write_example(tmp, days=days or 0.5, gate_s=2.0, kind="overlapping",
                                    seed=seed, truth=truth)
        p = got["paths"]
        summary = import_csv(p["counter.csv"], Path(tmp) / "run.h5",
                             metadata=p["two_device.toml"], azimuth_log=p["encoder.csv"])
        out["sim_s"] = time.perf_counter() - t0
        out["n_gaps"], out["n_glitches"] = 0, 0
        out["n_dropped"] = summary.n_dropped
        for fit in cfg.fits:
            out["fits"][fit.label] = _fit_record(summary.out_path, cfg, fit)
    return out


def medium_mirror(sc, truth: dict) -> dict:
    """The mirror of the injected Sun velocity, -v_sun - 2 v_orbit (km/s, v_orbit at the middle
    of the campaign): the lab velocity through the medium changes sign, which leaves its
    quadratic 2 theta signal unchanged up to the Earth-rotation velocity and the change of the
    orbital velocity during the campaign (derived)."""
    from fringe.constants import C_M_S
    from fringe.frames import earth_velocity_beta

    orb = earth_velocity_beta(sc.epoch, [0.5 * sc.duration_s])[0] * C_M_S / 1e3
    return {n: -truth[n] - 2.0 * float(orb[i]) for i, n in enumerate(SUN)}


# ------------------------------------------------------------------------------------------
# Statistics
# ------------------------------------------------------------------------------------------

P1 = math.erf(1 / math.sqrt(2))          # 2 Phi(1) - 1 = 0.6827 (normal distribution)
P196 = math.erf(1.96 / math.sqrt(2))     # 2 Phi(1.96) - 1 = 0.9500


def pulls(records: list, label: str, names) -> np.ndarray:
    """(N, k) pulls (estimate - truth) / sigma of one fit label."""
    return np.array([[(r["fits"][label]["value"][n] - r["truth"][n])
                      / r["fits"][label]["sigma"][n] for n in names] for r in records])


def mahalanobis2(records: list, label: str, names, zero: bool = False) -> np.ndarray:
    """Per campaign (est - truth)^T Cov^-1 (est - truth) over ``names`` (~chi2_k)."""
    out = []
    for r in records:
        f = r["fits"][label]
        idx = [f["cov_names"].index(n) for n in names]
        cov = np.array(f["cov"])[np.ix_(idx, idx)]
        d = np.array([f["value"][n] - (0.0 if zero else r["truth"][n]) for n in names])
        out.append(float(d @ np.linalg.solve(cov, d)))
    return np.array(out)


def coverage_table(records: list, label: str, names) -> list[dict]:
    p = pulls(records, label, names)
    n = p.shape[0]
    rows = []
    for j, name in enumerate(names):
        est = np.array([r["fits"][label]["value"][name] - r["truth"][name] for r in records])
        sig = np.array([r["fits"][label]["sigma"][name] for r in records])
        eff = [r["fits"][label]["efficiency"].get(name) for r in records]
        eff = [e for e in eff if e is not None]
        rows.append({"name": name, "n": n,
                     "cov1": float(np.mean(np.abs(p[:, j]) <= 1.0)),
                     "cov196": float(np.mean(np.abs(p[:, j]) <= 1.96)),
                     "pull_mean": float(np.mean(p[:, j])),
                     "pull_std": float(np.std(p[:, j], ddof=1)),
                     "scatter_ratio": float(np.std(est, ddof=1) / np.median(sig)),
                     "eff_median": float(np.median(eff)) if eff else None})
    return rows


def any_exceed(records: list, label: str, names, threshold: float = 3.0,
               zero: bool = True) -> dict:
    """Fraction of campaigns with any |est - (0 or truth)|/sigma > threshold over ``names``,
    with the rate expected for independent normal estimates and for normal estimates with the
    campaigns' mean correlation matrix (Monte Carlo, 400 000 draws)."""
    z = np.array([[(r["fits"][label]["value"][n] - (0.0 if zero else r["truth"][n]))
                   / r["fits"][label]["sigma"][n] for n in names] for r in records])
    hits = np.any(np.abs(z) > threshold, axis=1)
    p_one = math.erfc(threshold / math.sqrt(2))          # two-sided normal tail
    corr = []
    for r in records:
        f = r["fits"][label]
        idx = [f["cov_names"].index(n) for n in names]
        c = np.array(f["cov"])[np.ix_(idx, idx)]
        s = np.sqrt(np.diag(c))
        corr.append(c / np.outer(s, s))
    mean_corr = np.mean(corr, axis=0)
    draws = np.random.default_rng(1).multivariate_normal(np.zeros(len(names)), mean_corr,
                                                         400_000)
    return {"n": int(z.shape[0]), "k": len(names), "hits": int(np.sum(hits)),
            "rate": float(np.mean(hits)), "expected_independent": 1 - (1 - p_one) ** len(names),
            "expected_correlated": float(np.mean(np.any(np.abs(draws) > threshold, axis=1))),
            "per_coefficient_rate": {n: float(np.mean(np.abs(z[:, j]) > threshold))
                                     for j, n in enumerate(names)},
            "max_abs_corr": float(np.max(np.abs(mean_corr - np.eye(len(names)))))}


def warning_rate(records: list, label: str, prefix: str) -> float:
    return float(np.mean([any(w.startswith(prefix) for w in r["fits"][label]["warnings"])
                          for r in records]))


# ------------------------------------------------------------------------------------------
# Tables
# ------------------------------------------------------------------------------------------

def _z(frac: float, p: float, n: int) -> float:
    return (frac - p) / math.sqrt(p * (1 - p) / n)


def _flag(z: float) -> str:
    return " ⚠" if abs(z) > 3 else ""


def markdown(results: dict) -> str:
    recs = results["records"]
    by = {}
    for r in recs:
        by.setdefault(r["config"], []).append(r)
    lines = ["### Coverage", "",
             "Coverage of the reported intervals (expected 68.27 % and 95.00 %; ± is the "
             "binomial standard deviation for that N, ⚠ marks |z| > 3 against it), pulls "
             "(est − truth)/σ (expected mean 0, std 1), scatter = std(est − truth) / median σ, "
             "efficiency = median Cramér–Rao σ / reported σ, ⟨d²⟩/k = mean Mahalanobis distance "
             "over the k coefficients (expected 1).", "",
             "| configuration | fit | N | coefficient | ≤ 1σ (%) | ≤ 1.96σ (%) | pull mean "
             "| pull std | scatter | efficiency | ⟨d²⟩/k |", "|" + "---|" * 11]
    for name, cfg in CONFIGS.items():
        if cfg.kind != "coverage" or name not in by:
            continue
        for fit in cfg.fits:
            rows = coverage_table(by[name], fit.label, cfg.names)
            d2 = float(np.mean(mahalanobis2(by[name], fit.label, cfg.names))) / len(cfg.names)
            for i, row in enumerate(rows):
                n = row["n"]
                d2_text = f"{d2:.3f}" if i == 0 else ""
                s1 = 100 * math.sqrt(P1 * (1 - P1) / n)
                s2 = 100 * math.sqrt(P196 * (1 - P196) / n)
                eff = f"{row['eff_median']:.3f}" if row["eff_median"] is not None else "—"
                lines.append(
                    f"| {cfg.label if i == 0 else ''} | {fit.label if i == 0 else ''} | {n} | "
                    f"{row['name']} | {100 * row['cov1']:.1f} ± {s1:.1f}"
                    f"{_flag(_z(row['cov1'], P1, n))} | {100 * row['cov196']:.1f} ± {s2:.1f}"
                    f"{_flag(_z(row['cov196'], P196, n))} | {row['pull_mean']:+.3f} ± "
                    f"{1 / math.sqrt(n):.3f} | {row['pull_std']:.3f} ± "
                    f"{1 / math.sqrt(2 * (n - 1)):.3f} | {row['scatter_ratio']:.3f} | {eff} | "
                    f"{d2_text} |")
    lines += ["", "### Null tests", "",
              "| test | fit | N | coefficients | campaigns with any \\|z\\| > 3 | expected "
              "(independent) | expected (mean correlation) | max \\|r\\| |", "|" + "---|" * 8]
    for name, cfg in CONFIGS.items():
        if cfg.kind not in ("null", "scramble") or name not in by:
            continue
        label = "reduced-chi2" if cfg.kind == "null" else "scrambled"
        names = cfg.names if cfg.kind == "null" else MODULATED
        a = any_exceed(by[name], label, names)
        sd = math.sqrt(a["expected_correlated"] * (1 - a["expected_correlated"]) / a["n"])
        lines.append(f"| {cfg.label} | {label} | {a['n']} | {', '.join(names)} | {a['hits']} "
                     f"({100 * a['rate']:.2f} % ± {100 * sd:.2f}) | "
                     f"{100 * a['expected_independent']:.2f} % | "
                     f"{100 * a['expected_correlated']:.2f} % | {a['max_abs_corr']:.2f} |")
    lines += _medium_lines(by)
    lines += _null_details(by)
    lines += _epoch_shift_lines(by)
    lines += _timing_lines(results, by)
    return "\n".join(lines) + "\n"


def _speed_limit_coverage(recs: list) -> str:
    """How often each 95 % speed limit lies at or above the injected speed (one-sided)."""
    parts = []
    for what, part, key in (("Sun speed", "sun_speed_kms", "sun"),
                            ("lab speed", "lab_speed_kms", "lab"),
                            ("horizontal lab speed", "lab_speed_kms", "horizontal")):
        up = "upper_95" if key != "horizontal" else "horizontal_upper_95"
        ok = [r["fits"]["reduced-chi2"]["derived"][part][up] >= r["fits"]["reduced-chi2"]
              ["true_speeds"][key] for r in recs if "derived" in r["fits"]["reduced-chi2"]]
        if ok:
            k, n = int(np.sum(ok)), len(ok)
            parts.append(f"{what} {k}/{n} = {100 * k / n:.1f} % "
                         f"(± {100 * math.sqrt(0.95 * 0.05 / n):.1f} % binomial at 95 %)")
    return "; ".join(parts)


def _medium_lines(by: dict) -> list[str]:
    out = []
    for name in ("medium", "medium-null"):
        if name in by and _speed_limit_coverage(by[name]):
            out += ["", f"Medium speed limits ({name}): the one-sided 95 % limit lies at or "
                    f"above the injected speed in {_speed_limit_coverage(by[name])}; "
                    "expected ≥ 95 % (docs/fit.md)."]
    if "medium" not in by:
        return out
    recs = by["medium"]
    near = [r for r in recs if _dist(r["fits"]["reduced-chi2"]["value"], r["mirror"])
            < _dist(r["fits"]["reduced-chi2"]["value"], r["truth"])]
    rest = [r for r in recs if r not in near]
    rows = coverage_table(rest, "reduced-chi2", SUN) if rest else []
    return out + ["", f"Medium: {len(near)} of {len(recs)} campaigns converged to the mirror "
            "solution "
            "−v_sun − 2 v_orbit (lab velocity through the medium reversed) instead of the "
            "injected one, with a σ that does not include the truth. Without them: coverage "
            + ", ".join(f"{r['name']} {100 * r['cov1']:.1f} % / {100 * r['cov196']:.1f} %, pull "
                        f"std {r['pull_std']:.3f}" for r in rows) + "."]


def _dist(a: dict, b: dict) -> float:
    return math.sqrt(sum((a[n] - b[n]) ** 2 for n in SUN))


def _null_details(by: dict) -> list[str]:
    out = []
    if "null" in by:
        recs = by["null"]
        z = pulls(recs, "reduced-chi2", KE)
        b0 = warning_rate(recs, "reduced-chi2", "b0-lab-fixed")
        c0 = warning_rate(recs, "reduced-chi2", "c0-lab-fixed")
        out += ["", f"No injection ({len(recs)} campaigns): per-coefficient rate of |z| > 3 "
                + ", ".join(f"{n} {100 * np.mean(np.abs(z[:, j]) > 3):.2f} %"
                            for j, n in enumerate(KE))
                + " (expected 0.27 % each, 2 (1 − Φ(3))); pull std over all "
                f"{z.size} pulls {np.std(z, ddof=1):.3f} ± {1 / math.sqrt(2 * z.size):.3f}; "
                f"B0 warning in {100 * b0:.2f} % of campaigns (expected 0.27 %); C0 warning "
                f"in {100 * c0:.2f} % (expected 0: with ke_ZZ free C0 is not tested, a caution "
                "note says so)."]
    for name in ("rms", "clock"):            # C0 (and B0) against the fitted model's own
        if name in by:
            recs = by[name]
            b0 = warning_rate(recs, "reduced-chi2", "b0-lab-fixed")
            c0 = warning_rate(recs, "reduced-chi2", "c0-lab-fixed")
            tested = ("C0 compared with the C0 the fitted coefficients predict" if name == "rms"
                      else "C0 not tested: cq_ZZ rests on C0 alone, a caution note says so")
            out += ["", f"{name} ({len(recs)} campaigns; lab_B0 tested against zero, {tested}):"
                    f" B0 warning in {100 * b0:.2f} %, C0 warning in {100 * c0:.2f} % of "
                    "campaigns (expected at most 0.27 % for each check that runs: the "
                    "difference of data and prediction scatters less than the stage-2 σ it is "
                    "compared with)."]
    if "scramble" in by:
        recs = by["scramble"]
        zs = pulls(recs, "scrambled", MODULATED)
        zz = pulls(recs, "scrambled", ("ke_ZZ",))[:, 0]
        raw = np.array([[r["fits"]["reduced-chi2"]["value"][n] / r["fits"]["reduced-chi2"]
                         ["sigma"][n] for n in MODULATED] for r in recs])
        zero = np.array([[r["fits"]["scrambled"]["value"][n] / r["fits"]["scrambled"]["sigma"][n]
                          for n in MODULATED] for r in recs])
        d2 = mahalanobis2(recs, "scrambled", MODULATED, zero=True)
        out += ["", f"Scrambled ({len(recs)} campaigns): before scrambling the median |est/σ| "
                f"of the four modulated coefficients is {np.median(np.abs(raw)):.1f}; after, "
                f"est/σ has mean {np.mean(zero):+.3f} and std {np.std(zero, ddof=1):.3f} "
                f"(expected 0 ± {1 / math.sqrt(zero.size):.3f} and 1 ± "
                f"{1 / math.sqrt(2 * zero.size):.3f}), mean Mahalanobis d²/4 against zero "
                f"{np.mean(d2) / 4:.3f}; ke_ZZ (C0, kept by a permutation) against its injected "
                f"value: pull mean {np.mean(zz):+.3f}, std {np.std(zz, ddof=1):.3f}; "
                f"pull of modulated coefficients against their injected values "
                f"{np.mean(np.abs(zs)):.1f} (mean |pull|)."]
    return out


def _epoch_shift_lines(by: dict) -> list[str]:
    if "epoch-shift" not in by:
        return []
    recs = by["epoch-shift"]
    dev, zero = [], []
    for r in recs:
        f = r["fits"]["epoch-shifted"]
        dev.append(max(abs(f["value"][n] - f["predicted"][n]) / f["sigma"][n] for n in KE))
        zero.append(max(abs(f["value"][n]) / f["sigma"][n] for n in MODULATED))
    return ["", f"Epoch shift ({len(recs)} campaigns, 30–365 d plus a random fraction of a day): "
            "the shifted fit equals the unshifted fit rotated by the sidereal phase change "
            f"(max |shifted − rotated| / σ over the 5 ke_*: median {np.median(dev):.2e}, "
            f"max {np.max(dev):.2e}); max |est/σ| over the modulated ke_* has median "
            f"{np.median(zero):.1f}: the signal is still there, on other coefficients. "
            "Not a null test."]


def _timing_lines(results: dict, by: dict) -> list[str]:
    out = ["", "### Cost", "", "| configuration | N | simulate (s, median) | fit (s, median) |",
           "|---|---|---|---|"]
    for name in by:
        recs = by[name]
        fit_s = [f["fit_s"] for r in recs for f in r["fits"].values()]
        out.append(f"| {name} | {len(recs)} | {np.median([r['sim_s'] for r in recs]):.2f} | "
                   f"{np.median(fit_s):.2f} |")
    m = results.get("meta", {})
    if m:
        out += ["", f"Wall time {m.get('wall_s', 0) / 60:.1f} min with {m.get('workers')} "
                f"workers; command `{m.get('command')}`; {m.get('date_utc')}; "
                f"{m.get('machine')}; fringe {m.get('fringe')}, numpy {m.get('numpy')}."]
        lib = m.get("library", {})
        if lib:
            mod = ", ".join(lib.get("git_modified", [])) or "none"
            out += ["", f"Library validated: fringe {lib['fringe']}, sources SHA-256 "
                    f"{lib['source_sha256']} (at the end of the run "
                    f"{lib.get('source_sha256_at_end', '?')}), git commit "
                    f"{lib.get('git_commit', 'unknown')}, library files modified in the work "
                    f"tree: {mod}."]
    return out


# ------------------------------------------------------------------------------------------
# Driver
# ------------------------------------------------------------------------------------------

def jobs_for(configs, n: int | None, n_null: int | None, seed: int) -> list[tuple]:
    out = []
    for name in configs:
        cfg = CONFIGS[name]
        count = (n_null if cfg.kind == "null" else n) or cfg.n_default
        if cfg.kind == "epoch-shift" and n is not None:
            count = max(10, n // 5)
        out += [(name, i, seed) for i in range(count)]
    return out


def _failed(job: tuple, reason) -> dict:
    """The record of a campaign that failed (kept out of the tables, reported on stderr)."""
    return {"config": job[0], "index": job[1], "error": " ".join(str(reason).split())[:400]}


def run_jobs(jobs: list[tuple], workers: int, progress=None) -> list[dict]:
    """Run the campaigns with the study library's engine (fringe.study.engines.map_tasks):
    here for ``workers`` <= 1, else in a pool of spawned processes that a failing campaign or a
    lost worker does not stop or hang."""
    from fringe.study.engines import map_tasks

    out = map_tasks(run_campaign, jobs, _failed, workers=workers, progress=progress)
    for rec in out:
        if "error" in rec:
            print(f"warning: campaign {rec['index']} of {rec['config']} failed: {rec['error']}",
                  file=sys.stderr)
    return sorted((r for r in out if "error" not in r), key=lambda r: (r["config"], r["index"]))


def library_identity() -> dict:
    """Which fringe was validated: version, a SHA-256 over its Python sources, and (when the
    package sits in a git work tree) the commit and the library files modified in the tree."""
    import hashlib
    import subprocess

    import fringe

    root = Path(fringe.__file__).resolve().parent
    digest = hashlib.sha256()
    for f in sorted(root.rglob("*.py")):
        digest.update(f.relative_to(root).as_posix().encode() + b"\0" + f.read_bytes())
    out = {"fringe": fringe.__version__, "source_sha256": digest.hexdigest()[:16]}
    try:
        git = ["git", "-C", str(root)]
        out["git_commit"] = subprocess.run(git + ["rev-parse", "--short", "HEAD"], check=True,
                                           capture_output=True, text=True).stdout.strip()
        status = subprocess.run(git + ["status", "--porcelain", "--", "."], check=True,
                                capture_output=True, text=True).stdout.splitlines()
        out["git_modified"] = [line[3:] for line in status]
    except (OSError, subprocess.CalledProcessError):
        pass
    return out


def _write_atomic(path: Path, text: str) -> None:
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        fh.write(text)
    os.replace(tmp, path)


def update_doc(path: Path, table: str) -> None:
    text = path.read_text(encoding="utf-8")
    begin, end = "<!-- validation:begin -->", "<!-- validation:end -->"
    if begin not in text or end not in text:
        raise SystemExit(f"{path}: markers {begin} / {end} not found")
    head, rest = text.split(begin, 1)
    _, tail = rest.split(end, 1)
    _write_atomic(path, head + begin + "\n" + table + end + tail)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", type=Path, help="directory for validation_results.json and "
                    "validation_table.md (created)")
    ap.add_argument("--n", type=int, help="campaigns per coverage configuration (default per "
                    "configuration: 400; medium and random walk 250; medium-null 100; "
                    "scramble 300; epoch shift 60)")
    ap.add_argument("--n-null", type=int, help="campaigns of the no-injection null (1500)")
    ap.add_argument("--configs", default=",".join(CONFIGS),
                    help=f"comma-separated subset of {', '.join(CONFIGS)}")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=20270203)
    ap.add_argument("--from-json", type=Path, help="re-render tables from a results file")
    ap.add_argument("--update-doc", type=Path, help="Markdown file whose marked section is "
                    "replaced by the tables")
    args = ap.parse_args(argv)
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")   # one BLAS thread per (spawned) worker process
    if args.from_json:
        results = json.loads(args.from_json.read_text(encoding="utf-8"))
    else:
        if args.out is None:
            ap.error("--out is required (or --from-json)")
        names = [c.strip() for c in args.configs.split(",") if c.strip()]
        unknown = [c for c in names if c not in CONFIGS]
        if unknown:
            ap.error(f"--configs: unknown {unknown[0]!r} (expected some of {', '.join(CONFIGS)})")
        args.out.mkdir(parents=True, exist_ok=True)
        jobs = jobs_for(names, args.n, args.n_null, args.seed)
        library = library_identity()
        t0 = time.time()

        def progress(done, total):
            if done % 50 == 0 or done == total:
                print(f"  {done}/{total} campaigns, {(time.time() - t0) / 60:.1f} min",
                      file=sys.stderr, flush=True)

        records = run_jobs(jobs, args.workers, progress)
        library["source_sha256_at_end"] = library_identity()["source_sha256"]
        if library["source_sha256_at_end"] != library["source_sha256"]:
            print("warning: the fringe sources changed during the run; the workers imported "
                  "them at the start (source_sha256)", file=sys.stderr)
        results = {"meta": {
            "command": "python validation/run_validation.py " + " ".join(
                a if not a.startswith("/") else Path(a).name for a in (argv or sys.argv[1:])),
            "date_utc": datetime.datetime.now(datetime.timezone.utc).strftime(
                "%Y-%m-%d %H:%M UTC"),
            "wall_s": time.time() - t0, "workers": args.workers, "seed": args.seed,
            "machine": f"{platform.machine()}, {os.cpu_count()} CPUs, {platform.system()} "
                       f"{platform.release()}, Python {platform.python_version()}, load "
                       f"average at end {os.getloadavg()[0]:.1f}",
            "library": library, "fringe": library["fringe"], "numpy": np.__version__,
            "configs": {n: CONFIGS[n].label for n in names}}, "records": records}
        _write_atomic(args.out / "validation_results.json", json.dumps(results) + "\n")
    table = markdown(results)
    print(table)
    if args.out is not None:
        _write_atomic(args.out / "validation_table.md", table)
    if args.update_doc:
        update_doc(args.update_doc, table)
    return 0


if __name__ == "__main__":
    sys.exit(main())
