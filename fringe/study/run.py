"""A whole study: N campaigns per grid value, simulated, fitted, reduced to study.json's content.

:func:`run_study` is what ``fringe study`` calls. It reads the scenario, draws (or takes) the
master seed, spawns each campaign's seeds, builds one :class:`~fringe.study.campaign.CampaignTask`
per campaign and grid value, runs them on the chosen engine
(:func:`fringe.study.engines.map_tasks`) and returns a plain JSON-ready dict (the schema is in
``docs/study.md``). The campaigns of every grid row share the same seeds (common random
numbers), so rows differ by the varied field, not by the noise drawn.
"""

from __future__ import annotations

import copy
import datetime
import logging
import math
import os
import time

try:
    import tomllib
except ImportError:  # Python 3.10
    import tomli as tomllib
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np

from fringe.errors import CampaignWarning, ConfigError, FitError
from fringe.study.campaign import CampaignTask, campaign_seeds, failure_record, run_campaign
from fringe.study.engines import map_tasks
from fringe.study.pulls import coefficient_table, mean_mahalanobis
from fringe.study.settings import VARY_FIELDS, StudySettings

__all__ = ["STUDY_FORMAT", "run_study"]

logger = logging.getLogger(__name__)

#: The ``format`` string of study.json.
STUDY_FORMAT = "fringe-study/1"

#: Per-campaign fields kept in study.json (the covariance matrices are left out).
_KEPT = ("row", "index", "seeds", "truth", "value", "sigma", "chi2_reduced", "n_turns_used",
         "warnings", "n_gaps", "n_glitches", "n_turns_permuted", "sim_s", "fit_s", "error",
         "error_class")


def _read_doc(path) -> dict:
    """The scenario file as parsed TOML (after :func:`load_scenario` has validated it)."""
    from fringe.experiment.scenario import load_scenario

    load_scenario(path)
    with open(path, "rb") as fh:
        return tomllib.load(fh)


def _vary_doc(doc: dict, field: str | None, value: float | None) -> dict:
    out = copy.deepcopy(doc)
    if field is None:
        return out
    section, key, _ = VARY_FIELDS[field]
    table = out.setdefault(section, {})
    if field == "duration_days":
        table.pop("duration_s", None)
    table[key] = value
    return out


def _forecast_sigma(sc, free, fit, demod) -> tuple[dict | None, str | None]:
    """Forecast sigma of each free coefficient for the fit's nuisances, or (None, why not)."""
    from fringe.constants import DAY_S
    from fringe.plan.forecast import forecast
    from fringe.plan.settings import plan_settings

    if fit.theory != sc.theory.name:
        return None, f"the fit's theory {fit.theory!r} is not the scenario's"
    nuis = (("lab_B0",) if fit.lab_b0 else ()) + (("lab_C0",) if fit.lab_c0 else ())
    try:
        st = plan_settings(sc, free=list(free))
        st = replace(st, targets={}, latitudes_deg=(), n_days=2, nuisances=nuis,
                     drift=demod.drift, max_days=max(1.0, sc.duration_s / DAY_S))
        res = forecast(sc, settings=st)
    except ConfigError as exc:
        return None, str(exc)
    return {n: float(res.sigma[n]) for n in free}, None


def _truths(settings: StudySettings, sc, free, sigma_fc, seeds) -> list[dict]:
    """The injected value of each free coefficient, per campaign."""
    if settings.mode == "null":
        return [dict.fromkeys(free, 0.0) for _ in seeds]
    if settings.inject_sigma is None:
        return [{n: float(sc.coefficients.get(n, 0.0)) for n in free} for _ in seeds]
    if sigma_fc is None or not all(math.isfinite(sigma_fc[n]) for n in free):
        raise ConfigError("StudySettings.inject_sigma: needs a finite forecast sigma of every "
                          "free coefficient (a [noise] section and a plan the fit's theory "
                          "supports)")
    k = settings.inject_sigma
    return [{n: float(k * sigma_fc[n] * x) for n, x in
             zip(free, np.random.default_rng(s["truth"]).standard_normal(len(free)))}
            for s in seeds]


def _row_tasks(settings, doc, source, row, value, seeds, fit, scratch):
    """The tasks and the description of one grid row."""
    from fringe.experiment.scenario import scenario_from_dict
    from fringe.fit.settings import default_free

    field = settings.vary[0] if settings.vary else None
    doc_row = _vary_doc(doc, field, value)
    where = source if field is None else f"{source} (StudySettings.vary {field}={value:g})"
    sc = scenario_from_dict(doc_row, where)
    free = tuple(fit.free) if fit.free else default_free(sc.setup(), sc.duration_s / 86400.0)
    sigma_fc, why = _forecast_sigma(sc, free, fit, settings.demod)
    truths = _truths(settings, sc, free, sigma_fc, seeds)
    fit_kw = fit.to_dict()
    tasks = []
    for i, (s, truth) in enumerate(zip(seeds, truths)):
        d = copy.deepcopy(doc_row)
        d["coefficients"] = {**d.get("coefficients", {}), **truth}
        tasks.append(CampaignTask(index=i, row=row, doc=d, source=where, seeds=s, truth=truth,
                                  fit=fit_kw, demod=settings.demod.to_dict(),
                                  scramble=settings.mode == "scramble", scratch_dir=scratch))
    desc = {"vary": None if field is None else
            {"field": field, "value": value, "unit": VARY_FIELDS[field][2]},
            "free": list(free), "sigma_forecast": sigma_fc, "forecast_note": why}
    return tasks, desc


def _fail(task, reason):
    return failure_record(task, reason)


def _summarise_row(desc: dict, records: list, mode: str) -> dict:
    ok = [r for r in records if "error" not in r]
    bad = [r for r in records if "error" in r]
    zero = mode != "coverage"
    free = desc["free"]
    return {**desc, "n_campaigns": len(records), "n_failed": len(bad),
            "pulls_against": "zero" if zero else "truth",
            "coefficients": coefficient_table(ok, free, desc["sigma_forecast"], zero),
            "mahalanobis_mean_per_k": mean_mahalanobis(ok, free, zero),
            "failures": [{"index": r["index"], "seeds": r["seeds"], "error": r["error"]}
                         for r in bad]}


def _warn_failures(records: list) -> None:
    for r in records:
        if "error" in r:
            warnings.warn(f"campaign {r['index']} (row {r['row']}, simulation seed "
                          f"{r['seeds']['simulation']}) failed: {r['error']}", CampaignWarning,
                          stacklevel=3)


def run_study(scenario_path, settings: StudySettings, *, progress=None) -> dict:
    """Run a study of the scenario file ``scenario_path``; returns study.json's content.

    Parameters
    ----------
    scenario_path : str or os.PathLike
        Scenario (TOML) with a ``[noise]`` section.
    settings : StudySettings
    progress : callable, optional
        ``progress(done, total)`` after each campaign.

    Returns
    -------
    dict
        Plain JSON-ready data (``docs/study.md``).

    Raises
    ------
    ConfigError, InputFileError
        A bad scenario or setting (one line).
    FitError
        Every campaign failed (the first failure's seed and reason).

    Warns
    -----
    CampaignWarning
        Once per failed campaign, with its seed (the others are kept).
    """
    from fringe.fit.settings import FitSettings
    from fringe.version import __version__

    source = str(scenario_path)
    doc = _read_doc(scenario_path)
    from fringe.experiment.scenario import scenario_from_dict

    base = scenario_from_dict(doc, source)
    fit = settings.fit or FitSettings(theory=base.theory.name)
    master = settings.seed if settings.seed is not None else \
        int(np.random.SeedSequence().entropy)
    seeds = campaign_seeds(master, settings.campaigns)
    # resolved here: a worker resolves a relative path against its own working directory
    scratch = None if settings.scratch_dir is None else os.path.abspath(settings.scratch_dir)
    values = settings.vary[1] if settings.vary else (None,)
    tasks, rows = [], []
    for r, value in enumerate(values):
        t, desc = _row_tasks(settings, doc, source, r, value, seeds, fit, scratch)
        tasks += t
        rows.append(desc)
    t0 = time.time()
    workers = settings.local_workers() if settings.engine == "local" else None
    records = map_tasks(run_campaign, tasks, _fail, engine=settings.engine,
                        workers=workers or 1, scheduler=settings.scheduler,
                        scheduler_file=settings.scheduler_file, progress=progress)
    wall = time.time() - t0
    if all("error" in r for r in records):
        first = records[0]
        raise FitError(f"study: all {len(records)} campaigns failed; campaign 0 (simulation "
                       f"seed {first['seeds']['simulation']}): {first['error']}")
    _warn_failures(records)
    by_row = [[rec for rec in records if rec["row"] == r] for r in range(len(rows))]
    return {"format": STUDY_FORMAT, "fringe": __version__, "scenario": Path(source).name,
            "title": base.title, "mode": settings.mode, "master_seed": master,
            "seed_scheme": "numpy.random.SeedSequence(master_seed).spawn(campaigns); per "
                           "campaign generate_state(3) = (simulation, truth, transform)",
            "campaigns_per_row": settings.campaigns, "inject_sigma": settings.inject_sigma,
            "fit": fit.to_dict(), "demodulation": settings.demod.to_dict(),
            "engine": settings.engine, "workers": workers,
            "rows": [_summarise_row(d, rec, settings.mode) for d, rec in zip(rows, by_row)],
            "campaigns": [{k: rec[k] for k in _KEPT if k in rec} for rec in records],
            "wall_s": wall,
            "date_utc": datetime.datetime.now(datetime.timezone.utc).strftime(
                "%Y-%m-%dT%H:%M:%SZ")}
