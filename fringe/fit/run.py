"""The whole fit of a run file: stage 1 (engine), stages 2-3 (fit), packaging (result).

:func:`fit_run` is what ``fringe fit`` calls; it returns a :class:`~fringe.io.fit_result.FitResult`
and the per-turn columns for the amplitudes file.
"""

from __future__ import annotations

import dataclasses
import datetime
import json
import logging
import os
import threading
import warnings
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from fringe.demodulate.engine import RecordInfo, stage1_store
from fringe.demodulate.gate import gate_factor
from fringe.demodulate.settings import DemodSettings
from fringe.demodulate.turn_store import Scratch, TurnStore
from fringe.errors import ConfigError, FitError, SimulationWarning, TimeScaleWarning
from fringe.experiment.apparatus import APPARATUS_KINDS, apparatus_fields, make_apparatus
from fringe.experiment.basis import Setup
from fringe.fit.settings import FitSettings
from fringe.fit.stages import stage2_and_3
from fringe.frames import Epoch, time_cautions_recorded, time_span_cautions
from fringe.io.fit_calibration import SignalCalibration, scale_sigmas
from fringe.io.fit_result import FitResult
from fringe.io.fit_sections import (
    Covariance,
    Derived,
    Estimate,
    FitInput,
    FitWarning,
    Harmonics,
    OneStage,
    Stage1,
    Statistics,
)
from fringe.io.runreader import open_run, sha256
from fringe.io.turns_file import TurnColumns
from fringe.theories import make_theory
from fringe.version import software_versions

logger = logging.getLogger(__name__)


#: The attributes of a simulated record's ``settings`` group that :func:`record_cautions` reads.
CAUTION_ATTRS = ("noise_free", "noise_json")


def setup_from_run(path: str, theory: str, dut1_s: float = 0.0, *,
                   while_written: bool = False, run=None) -> tuple[Setup, dict]:
    """Build the Setup (site, epoch, apparatus, theory, units) from a run file's metadata.

    ``while_written``: also from a file a writer still holds (:func:`fringe.io.runreader
    .open_run`); the metadata's sample counts and times are then those of its flushed part.
    ``run``: the record already open (a :class:`~fringe.io.runreader.RunFile` of ``path``),
    left open; else it is opened here.
    """
    if run is None:
        with open_run(path, check_values=False, while_written=while_written) as own:
            return setup_from_run(path, theory, dut1_s, run=own)
    meta = run.to_dict()
    site = run.site
    attrs = dict(run.apparatus)
    if "settings" in meta["extra_groups"]:      # for record_cautions, read while open
        meta["settings_attrs"] = run.read_group_attrs("settings", only=CAUTION_ATTRS)
    cls = APPARATUS_KINDS.get(attrs.get("kind"))
    fields = apparatus_fields(cls) if cls else set()
    ignored = sorted(set(attrs) - fields - {"kind"})
    if ignored:      # the run format passes other labs' extra attributes through
        logger.info("%s: apparatus attributes not used by the model: %s", path,
                    ", ".join(map(str, ignored)))
    apparatus = make_apparatus({k: v for k, v in attrs.items() if k in fields or k == "kind"},
                               source=f"{path}: apparatus")
    setup = Setup(site=site, epoch=Epoch(meta["epoch_utc"], dut1_s), apparatus=apparatus,
                  theory=make_theory(theory), units=meta["signal_units"])
    return setup, meta


def fit_run(path: str, settings: FitSettings, demod: DemodSettings | None = None, *,
            engine: str = "local", scheduler=None, dut1_s: float = 0.0, progress=None,
            one_stage: bool = False, scratch_dir: str | None = None, budget=None,
            hash_input: bool = True) -> tuple[FitResult, TurnColumns]:
    """Fit a run file end to end.

    Parameters
    ----------
    path : str
        Run file (format version 1 or 2; a version-2 file's gate, scale uncertainty and
        weights are applied and recorded in ``FitResult.calibration``).
    settings : FitSettings
    demod : DemodSettings, optional
    engine : {"local", "dask"}
    scheduler : str or distributed.Client, optional
        For ``engine="dask"``.
    dut1_s : float
        UT1 - UTC at the record's epoch, s.
    progress : callable, optional
        Called with the number of samples processed.
    one_stage : bool
        Also run the one-stage global least-squares cross-check (a second pass; it holds the
        whole turn table in memory).
    scratch_dir : str, optional
        Where a record of more than SEGMENT_TURNS turns keeps its turn table and fit rows
        while it is fitted (:mod:`fringe.demodulate.turn_store`; default: the system's temporary
        directory). Shorter records are fitted in memory.
    budget : fringe.io.budget_file.Budget, optional
        Declared systematic terms (:func:`fringe.io.budget_file.read_budget`); with it, or with
        ``settings.regress``, the result holds its ``systematics`` part
        (:mod:`fringe.fit.budget`; linear theories).
    hash_input : bool
        Compute the input's SHA-256 for the result's provenance (``FitResult.input.sha256``;
        on a second thread, beside stages 2-3). False leaves it ``""`` (not computed): for
        a study's campaign records, temporary files known by their seeds
        (:func:`fringe.study.campaign.fit_record`); the numbers are the same either way.

    Returns
    -------
    (FitResult, TurnColumns)
        The result and the per-turn columns (for :func:`fringe.io.fit_result.write_turns`); close
        the columns (or use them as a context manager) to remove the scratch files.
    """
    demod = demod or DemodSettings()
    with open_run(path, check_values=False) as run:    # one opening: metadata and stage 1
        setup, meta = setup_from_run(path, settings.theory, dut1_s, run=run)
        for ch in settings.regress:
            if ch not in meta["aux_channels"]:
                raise ConfigError(f"FitSettings.regress {ch}: {path} has no auxiliary channel "
                                  f"{ch!r} (has {', '.join(meta['aux_channels']) or 'none'})")
        _check_budget_early(budget, setup, settings)
        scratch = Scratch(scratch_dir)
        try:
            with time_cautions_recorded():   # the time-scale cautions are records (cautions)
                cautions = record_cautions(path, setup, meta)
                result, store, models = _fit(path, setup, meta, settings, demod, engine,
                                             scheduler, progress, scratch, one_stage, dut1_s,
                                             cautions, budget,
                                             run=run if engine == "local" else None,
                                             hash_input=hash_input)
        except BaseException:
            scratch.close()
            raise
    for w in cautions:
        warnings.warn(w.sentence, SimulationWarning if w.code == "simulated-noise-free"
                      else TimeScaleWarning, stacklevel=2)
    return result, TurnColumns(setup, store, models, scratch, span_s=result.span_s)


def record_cautions(path: str, setup: Setup, meta: dict) -> list[FitWarning]:
    """Warnings about what the record can support, known before fitting.

    Its times outside a reliable span (:func:`fringe.frames.time_span_cautions`) and a
    simulated record without noise (the run file's ``settings`` group, written by
    :func:`fringe.simulation.simulate`).
    """
    out = [FitWarning(c.code, c.sentence, c.values) for c in time_span_cautions(
        setup.epoch, float(meta["time_first_s"]), float(meta["time_last_s"]))]
    if "settings" in meta.get("extra_groups", ()):
        attrs = meta.get("settings_attrs")
        if attrs is None:
            with open_run(path, check_values=False) as run:
                attrs = run.read_group_attrs("settings", only=CAUTION_ATTRS)
        try:
            noise = json.loads(attrs.get("noise_json", "null"))
        except (TypeError, ValueError):
            noise = None
        silent = isinstance(noise, dict) and not any(
            noise.get(k) for k in ("h2", "h0", "hm1", "hm2"))
        if attrs.get("noise_free") or silent:
            out.append(FitWarning(
                "simulated-noise-free", f"{path} is a simulated record without noise (its "
                "scenario had no [noise] levels, or noise_free was asked): the uncertainties "
                "show the systematics and numerical rounding only, not what a real record "
                "gives", {}))
    return out


def _check_budget_early(budget, setup: Setup, settings: FitSettings) -> None:
    """Refuse, before any work, a budget the fit cannot use (theory, names, units)."""
    if budget is None and not settings.regress:
        return
    if not setup.theory.linear:
        if budget is not None:
            raise ConfigError(f"{budget.path}: a systematic budget needs a linear theory "
                              f"(FitSettings.theory {settings.theory!r} is not)")
        return
    if budget is None:
        return
    from fringe.fit.budget import check_budget

    names = tuple(n for n in setup.theory.parameter_names if n != "rms_kt")
    check_budget(budget, names, dict(setup.theory.parameter_units), setup.units)


def _systematics(res, models, settings, budget, calibration, meta):
    """The result's ``systematics`` part (linear fits with regressions or a budget), or None."""
    if models.cache is None or res.cov_all is None or not (settings.regress or budget):
        return None
    from fringe.fit.budget import systematics_of

    if budget is not None:
        for i, t in enumerate(budget.terms):
            if t.coefficient is not None and t.coefficient not in res.names:
                raise ConfigError(f"{budget.path}: term[{i}].coefficient: expected a free "
                                  f"coefficient of this fit ({', '.join(res.names)}), got "
                                  f"{t.coefficient!r}")
    rel = calibration.scale_rel_sigma if calibration is not None else None
    return systematics_of(res, models.cache, budget, rel, dict(meta["aux_channels"]))


#: The thread that hashes the fit's input, started once per process: (process id, executor).
_HASHER: tuple[int, ThreadPoolExecutor] | None = None


def _hasher() -> ThreadPoolExecutor:
    """The executor hashing inputs beside the fit (one thread; a forked child starts its own).

    Kept for the process, so that a study's many fits do not start a thread each.
    """
    global _HASHER
    if _HASHER is None or _HASHER[0] != os.getpid():
        _HASHER = (os.getpid(), ThreadPoolExecutor(max_workers=1,
                                                   thread_name_prefix="fringe-hash"))
    return _HASHER[1]


def _fit(path, setup, meta, settings, demod, engine, scheduler, progress, scratch, one_stage,
         dut1_s, cautions, budget=None, run=None, hash_input=True):
    """Stages 1-3 and the packaging (:func:`fit_run`); returns the result, store and models.

    ``run``: the record open for stage 1 (local engine), or None. ``hash_input``: compute the
    input's SHA-256 (else ``""``).
    """
    store, info = stage1_store(path, demod, aux_channels=tuple(settings.regress),
                               engine=engine, scheduler=scheduler, progress=progress,
                               scratch=scratch, run=run)
    if not np.any(store.accepted):
        raise FitError(no_block_message(info, store, demod))
    span_s = float(meta["time_last_s"] - meta["time_first_s"])
    # the input's hash (provenance) is read on the second core while stages 2-3 run (measured
    # better than beside the survey, whose HDF5 calls hold the GIL); stopped if they fail
    stop = threading.Event()
    digest = _hasher().submit(sha256, path, stop=stop) if hash_input else None
    try:
        harm, res, free, models = stage2_and_3(setup, store, settings, span_s / 86400.0,
                                               scratch)
    except BaseException:
        stop.set()
        raise
    cross_check = None
    if one_stage and setup.theory.linear:
        from fringe.fit.onestage import one_stage_fit

        cross_check = OneStage.from_fit(one_stage_fit(info, demod, setup, store.load(),
                                                      res.names, settings))
    res.warnings[:0] = cautions
    try:        # the hash is put in last: what follows does not need it
        result = _package(path, setup, meta, settings, demod, info, store, harm, res, span_s,
                          "", engine, dut1_s, cross_check)
        parts = {}          # the result's later parts, put in with the hash (one rebuild)
        calibration = _calibration(meta, info, result.coefficients)
        if calibration is not None:
            notes = result.notes + tuple(calibration.sentences())
            if cross_check is not None and (calibration.gate_s or calibration.weighted):
                notes += ("the one-stage cross-check fits the samples without the gate "
                          "correction and unweighted",)
            parts.update(calibration=calibration, notes=notes)
        systematics = _systematics(res, models, settings, budget, calibration, meta)
        if systematics is not None:
            parts["systematics"] = systematics
        from fringe.fit.likelihood import likelihood_of

        likelihood = likelihood_of(setup, res, settings, span_s)
        if likelihood is not None:
            parts["likelihood"] = likelihood
    except BaseException:
        stop.set()
        raise
    if digest is not None:
        parts["input"] = dataclasses.replace(result.input, sha256=digest.result())
    return (dataclasses.replace(result, **parts) if parts else result), store, models


def _calibration(meta: dict, info, coefficients) -> SignalCalibration | None:
    """The result's calibration part from the run file's version-2 metadata (None if none)."""
    attrs, weighted = meta.get("signal_attrs", {}), bool(meta.get("weighted", False))
    if not attrs and not weighted:
        return None
    gate = {}
    if "gate_s" in attrs:
        omega = 2.0 * np.pi / info.turn_period_s
        gate = {"gate_s": attrs["gate_s"], "gate_kind": attrs["gate_kind"],
                "turn_period_s": info.turn_period_s,
                **{f"gate_factor_{m}theta": float(gate_factor(m * omega, attrs["gate_s"],
                                                              attrs["gate_kind"]))
                   for m in (1, 2)}}
    scale = {}
    if "scale_rel_sigma" in attrs:
        rel = attrs["scale_rel_sigma"]
        scale = {"scale_rel_sigma": rel, "scale_factor": attrs.get("scale_factor", 1.0),
                 "instrument_units": attrs.get("instrument_units", "?"),
                 "scale_sigma": scale_sigmas({k: e.value for k, e in coefficients.items()},
                                             rel)}
    return SignalCalibration(**gate, **scale, weighted=weighted)


def no_block_message(info: RecordInfo, store: TurnStore, demod: DemodSettings) -> str:
    """The one-line error of a record whose every block was rejected, naming the coverage."""
    motion = info.motion
    counts = store.counts()
    if motion is not None and info.gap_harmonic == 2:
        need = (f"a largest gap in 2 theta of at most {demod.max_2theta_gap_deg:g} deg "
                f"(DemodSettings.max_2theta_gap_deg) and at least {demod.min_samples} valid "
                "samples (DemodSettings.min_samples)")
    else:
        need = (f"a largest gap in theta of at most {demod.max_angle_gap_deg:g} deg "
                f"(DemodSettings.max_angle_gap_deg) and at least {demod.min_samples} valid "
                "samples (DemodSettings.min_samples)")
    what = motion.describe() if motion is not None else "the record"
    return (f"{info.path}: samples/azimuth: none of the {counts['n_blocks']} blocks defines a "
            f"2 theta pair: each needs {need} and a determined block fit (motion: {what}); "
            "no block gives C and B (too few readings per block, or positions that cannot "
            "separate C from B)")


def _package(path, setup, meta, settings, demod, info, store, harm, res, span_s, input_sha256,
             engine, dut1_s, one_stage) -> FitResult:
    sig = np.sqrt(np.diag(res.cov))
    sel = store.accepted
    rms_med = store.median_accepted_rms()
    counts = store.counts()
    n_blocks = counts.pop("n_blocks")
    stage1 = Stage1(n_blocks, counts, turn_period_s=info.turn_period_s, residual_rms=rms_med,
                    white_noise_per_sample=rms_med, settings=demod.to_dict(), glitch_rule=(
                        f"residual RMS > median + {demod.glitch_threshold} x 1.4826 x MAD"))
    factor = setup.apparatus.two_path_factor(setup.units)
    harmonics = None if harm is None else Harmonics(
        harm["names"], harm["value"], harm["sigma"], harm["covariance"], harm["chi2_reduced"],
        setup.units, setup.apparatus.observable(setup.units), (factor.real, factor.imag))
    return FitResult(
        theory=setup.theory.name, units=setup.units,
        coefficients={n: Estimate(float(v), float(s))
                      for n, v, s in zip(res.names, res.value, sig)},
        fixed=dict(settings.fixed),
        covariance=Covariance(res.names, res.cov),
        harmonics=harmonics, warnings=res.warnings, efficiency=res.efficiency,
        statistics=Statistics(res.chi2_reduced, res.dof, settings.uncertainty,
                              int(np.sum(sel))),
        stage1=stage1, site=meta["site"], apparatus=meta["apparatus"],
        epoch_utc=meta["epoch_utc"], span_s=span_s,
        settings={"fit": settings.to_dict(), "engine": engine, "dut1_s": dut1_s},
        input=FitInput(str(path), input_sha256, meta["n_samples"]),
        software=software_versions(),
        created_utc=datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        nuisance={n: Estimate(e["value"], e["sigma"]) for n, e in res.nuisance.items()},
        notes=res.notes, upper_limits=res.upper_limits,
        derived=Derived(**res.derived) if res.derived else None, one_stage=one_stage,
        motion=info.motion, sessions=res.sessions)
