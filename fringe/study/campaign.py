"""One campaign of a study: simulate the scenario with its seed, fit it as ``fringe fit`` would.

Which function for which job:

* :func:`campaign_seeds` -- the (simulation, truth, transform) seeds of every campaign, spawned
  from the study's master seed with ``numpy.random.SeedSequence.spawn``.
* :class:`CampaignTask` -- everything one campaign needs, in plain picklable types (the scenario
  travels as its parsed TOML, not as objects), so a process pool or a dask worker can run it.
* :func:`run_campaign` -- simulate, optionally scramble, fit; returns the campaign's record.
  Any failure becomes a record with ``error`` (one line) and the campaign's seeds: one bad
  campaign never stops the others.
* :func:`simulate_run`, :func:`fit_record`, :func:`scramble_turns` -- its three steps, also used
  by ``validation/run_validation.py``.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from fringe.errors import ConfigError, FringeError, warnings_kept_in_result

__all__ = ["CampaignTask", "campaign_seeds", "fit_record", "run_campaign", "scramble_turns",
           "simulate_run"]


def campaign_seeds(master_seed: int, n: int) -> list[dict]:
    """Seeds of ``n`` campaigns spawned from ``master_seed`` (``numpy.random.SeedSequence``).

    Campaign i gets the i-th child of ``SeedSequence(master_seed).spawn(n)``; its three 32-bit
    words seed the simulation (``simulate(seed=...)``), the draw of the injected truth and the
    scramble permutation. The first n children do not depend on n, so a larger study extends a
    smaller one with the same master seed.
    """
    out = []
    for child in np.random.SeedSequence(int(master_seed)).spawn(int(n)):
        sim, truth, aux = (int(x) for x in child.generate_state(3))
        out.append({"simulation": sim, "truth": truth, "transform": aux})
    return out


@dataclass(frozen=True)
class CampaignTask:
    """One campaign, in plain types (picklable for a process pool or a dask worker).

    Parameters
    ----------
    index : int
        Campaign number within its row.
    row : int
        Grid row (0 without a grid).
    doc : dict
        The scenario as parsed TOML, with this campaign's truth in ``[coefficients]``.
    source : str
        The scenario's name in messages.
    seeds : dict
        ``simulation``, ``truth`` and ``transform`` seeds (:func:`campaign_seeds`).
    truth : dict
        Injected value of each free coefficient.
    fit : dict
        Keywords of :class:`~fringe.fit.settings.FitSettings`.
    demod : dict
        Keywords of :class:`~fringe.demodulate.settings.DemodSettings`.
    scramble : bool
        Permute whole turns in time before the fit.
    scratch_dir : str or None
        Absolute directory for the temporary run files (None: the system's).
    """

    index: int
    row: int
    doc: dict
    source: str
    seeds: dict
    truth: dict
    fit: dict = field(default_factory=dict)
    demod: dict = field(default_factory=dict)
    scramble: bool = False
    scratch_dir: str | None = None


def simulate_run(doc: dict, source: str, path: str, seed: int) -> dict:
    """Write the run file of one campaign of scenario ``doc``; returns the simulation summary."""
    from fringe.experiment.scenario import scenario_from_dict
    from fringe.simulation.campaign import simulate

    return simulate(scenario_from_dict(doc, source), path, seed=seed)


def fit_record(path: str, settings, demod=None, keep=None) -> dict:
    """Fit ``path`` with :func:`fringe.fit.run.fit_run` (``fringe fit``'s path); a plain record.

    The record holds each free coefficient's value and sigma, the covariance, the white-noise
    efficiency, the reduced chi-square, the turns used, the fit's warnings (each its code and
    the first 40 characters of its sentence, from the result, so that campaigns fitted in
    threads of one process keep their own) and the time taken (s). ``keep(result, columns)``,
    if given, returns more fields (a dict) taken from the fit result and its per-turn columns.

    The record's SHA-256 is not computed (``result.input.sha256`` is ``""``): a campaign's
    record is a temporary file, known by its seeds; the numbers are those of ``fringe fit``.
    """
    from fringe.fit.run import fit_run

    t0 = time.perf_counter()
    with warnings_kept_in_result():         # recorded below, from the result
        res, cols = fit_run(path, settings, demod, hash_input=False)
    with cols:
        extra = keep(res, cols) if keep is not None else {}
    names = list(res.covariance.names)
    return {**extra, "value": {n: res.coefficients[n].value for n in names},
            "sigma": {n: res.coefficients[n].sigma for n in names},
            "cov_names": names, "cov": [list(map(float, row)) for row in res.covariance.matrix],
            "efficiency": dict(res.efficiency or {}),
            "chi2_reduced": res.statistics.chi2_reduced,
            "n_turns_used": res.statistics.n_turns_used,
            "warnings": sorted({f"{w.code}: {w.sentence[:40]}" for w in res.warnings}),
            "epoch_utc": res.epoch_utc, "fit_s": time.perf_counter() - t0}


def scramble_turns(src: str, dst: str, rng: np.random.Generator) -> int:
    """Copy a run file, permuting the signal of whole turns among the turn slots.

    Needs a record without gaps whose turn is a whole number m of samples, sampled so that the
    azimuth repeats exactly every m samples (checked). Times, azimuths and metadata are kept,
    so each turn's amplitudes move to a random sidereal time. Returns the number of turns.

    Raises
    ------
    ConfigError
        The record has gaps or its turn is not a whole number of samples.
    """
    import h5py

    shutil.copyfile(src, dst)
    with h5py.File(dst, "r+") as f:
        t = f["samples/time"][:]
        az = f["samples/azimuth"][:]
        y = f["samples/signal"][:]
        dt = float(np.median(np.diff(t)))
        period = 2 * np.pi * (t[-1] - t[0]) / abs(np.unwrap(az)[-1] - np.unwrap(az)[0])
        m = int(round(period / dt))
        n_turns = t.size // m
        idx = np.arange(n_turns * m).reshape(n_turns, m)
        same = np.abs(np.angle(np.exp(1j * (az[idx] - az[idx[0]])))) < 1e-6
        if not (np.all(np.abs(np.diff(t) - dt) < 1e-6 * dt) and abs(period - m * dt) < 1e-6 * dt
                and np.all(same)):
            raise ConfigError("scramble: needs a gap-free record of continuous rotation with a "
                              "whole number of samples per turn (no [systematics] gaps or "
                              "dropouts)")
        y[idx] = y[idx[rng.permutation(n_turns)]]
        f["samples/signal"][...] = y
    return n_turns


def _scratch(task: CampaignTask) -> tempfile.TemporaryDirectory:
    base = task.scratch_dir
    if base is not None and not os.path.isdir(base):
        raise ConfigError(f"scratch_dir=DIR: {base} is not a directory on this machine "
                          "(each worker needs it)")
    return tempfile.TemporaryDirectory(prefix=".fringe-study-", dir=base)


def _run(task: CampaignTask) -> dict:
    from fringe.demodulate.settings import DemodSettings
    from fringe.fit.settings import FitSettings
    from fringe.heap import keep_freed_memory

    keep_freed_memory()          # a worker process fits many campaigns (as the fringe command)
    out = {"row": task.row, "index": task.index, "seeds": dict(task.seeds),
           "truth": dict(task.truth)}
    with _scratch(task) as tmp:
        run = str(Path(tmp) / "run.h5")
        t0 = time.perf_counter()
        summary = simulate_run(task.doc, task.source, run, task.seeds["simulation"])
        out["sim_s"] = time.perf_counter() - t0
        out["n_gaps"], out["n_glitches"] = summary["n_gaps"], summary["n_glitches"]
        if task.scramble:
            path = str(Path(tmp) / "scrambled.h5")
            rng = np.random.default_rng(task.seeds["transform"])
            out["n_turns_permuted"] = scramble_turns(run, path, rng)
            run = path
        fit = dict(task.fit)
        for key in ("free", "regress"):
            if fit.get(key) is not None:
                fit[key] = tuple(fit[key])
        out.update(fit_record(run, FitSettings(**fit), DemodSettings(**task.demod)))
    return out


def run_campaign(task: CampaignTask) -> dict:
    """Simulate and fit one campaign; its record, or a failure record with the seeds.

    A failure of any kind (a :class:`~fringe.errors.FringeError` or another exception) is
    returned as ``{"row", "index", "seeds", "truth", "error", "error_class"}`` with a one-line
    ``error``: the study reports it and goes on with the other campaigns.
    """
    try:
        return _run(task)
    except Exception as exc:  # noqa: BLE001 -- reported with the campaign's seed, never hidden
        return failure_record(task, exc)


def failure_record(task: CampaignTask, exc: BaseException | str) -> dict:
    """The record of a campaign that failed: its place, seeds, truth and a one-line reason."""
    if isinstance(exc, BaseException):
        text = " ".join(str(exc).split()) or type(exc).__name__
        cls = type(exc).__name__
        if not isinstance(exc, FringeError):
            text = f"{cls}: {text}"
    else:
        text, cls = " ".join(str(exc).split()), "WorkerLost"
    return {"row": task.row, "index": task.index, "seeds": dict(task.seeds),
            "truth": dict(task.truth), "error": text[:400], "error_class": cls}
