"""fringe: design, fit and publish rotating-apparatus tests of light-speed and clock isotropy.

The whole job in a few functions (each imports what it needs when called, so ``import fringe``
stays light and loads neither matplotlib nor the fit):

========================  ===================================================================
:func:`load_scenario`     read a scenario file (TOML): site, calendar, apparatus, table, theory
:func:`predict`           the signal of hypothetical coefficients: harmonics and signal map
:func:`simulate`          a synthetic campaign written as a run file (HDF5)
:func:`read_run`          open and validate a run file (a context manager)
:func:`fit_record`        fit a run file: per-turn demodulation, harmonics, coefficients
:func:`load_fit`          read a fit-result file (JSON) back
:func:`write_report`      the report of a fit: Markdown, LaTeX, HTML, figures, provenance
:func:`forecast`          Fisher-matrix forecast of a scenario's bounds; days to a target
:func:`run_study`         many simulated campaigns of a scenario, each fitted: pulls, coverage
========================  ===================================================================

The packages below hold the stages of the data path (``DEVELOPERS.md`` draws the map):
:mod:`fringe.experiment`, :mod:`fringe.theories`, :mod:`fringe.noise`, :mod:`fringe.io`,
:mod:`fringe.demodulate`, :mod:`fringe.simulation`, :mod:`fringe.fit`, :mod:`fringe.plan`,
:mod:`fringe.report`. ``docs/python.md`` shows a session from scenario to report.

Examples
--------
>>> import fringe
>>> scenario = fringe.load_scenario("examples/cavity_pair.toml")      # doctest: +SKIP
>>> fringe.predict(scenario, ke_XY=1e-17).summary()                   # doctest: +SKIP
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from fringe.version import __version__

if TYPE_CHECKING:
    from fringe.experiment.prediction import Prediction
    from fringe.experiment.scenario import Scenario
    from fringe.io.fit_result import FitResult
    from fringe.io.runreader import RunFile
    from fringe.plan.result import PlanResult

__all__ = ["__version__", "fit_record", "forecast", "load_fit", "load_scenario", "predict",
           "read_run", "run_study", "simulate", "write_report"]

PathLike = str | os.PathLike


def load_scenario(path: PathLike, **values: float) -> Scenario:
    """Read a scenario file, optionally with coefficient values set.

    Parameters
    ----------
    path : str or os.PathLike
        Scenario file (TOML; ``docs/scenario.md``).
    **values : float
        Coefficient values that replace the scenario's ``[coefficients]`` (e.g.
        ``ke_XY=1e-17``; dimensionless, or km/s for the medium's velocity components).

    Returns
    -------
    fringe.experiment.Scenario
    """
    from fringe.experiment.scenario import load_scenario as _load

    scenario = _load(path)
    return scenario.with_coefficients(values) if values else scenario


def _scenario(scenario: Scenario | PathLike, values: dict) -> Scenario:
    if isinstance(scenario, (str, os.PathLike)):
        return load_scenario(scenario, **values)
    return scenario.with_coefficients(values) if values else scenario


def predict(scenario: Scenario | PathLike, **values: float) -> Prediction:
    """The noise-free signal of a scenario: its sidereal/annual harmonics and signal map.

    Parameters
    ----------
    scenario : Scenario or path
        A scenario, or the path of a scenario file.
    **values : float
        Hypothetical coefficient values (replace the scenario's).

    Returns
    -------
    fringe.experiment.Prediction
        ``summary()`` prints the harmonic table; ``to_dict()`` gives it as plain data; the map
        (signal against azimuth and sidereal angle) is in ``map_signal``.
    """
    from fringe.experiment.prediction import predict as _predict

    return _predict(_scenario(scenario, values))


def simulate(scenario: Scenario | PathLike, out_path: PathLike, *, seed: int,
             noise_free: bool = False, overwrite: bool = False, **values: float) -> dict:
    """Simulate a campaign (signal + noise + drift + systematics) and write it as a run file.

    Parameters
    ----------
    scenario : Scenario or path
        A scenario, or the path of a scenario file.
    out_path : str or os.PathLike
        The run file to write (HDF5, ``docs/run-format.md``); written whole or not at all.
    seed : int
        Random seed: the same seed gives the same file.
    noise_free : bool
        Write the bare signal (no noise, drift or systematics).
    overwrite : bool
        Replace an existing ``out_path``.
    **values : float
        Injected coefficient values (replace the scenario's).

    Returns
    -------
    dict
        ``path``, ``n_samples``, ``n_gaps``, ``n_glitches`` and ``truth`` (the injected values).
    """
    from fringe.simulation.campaign import simulate as _simulate

    protect = [scenario] if isinstance(scenario, (str, os.PathLike)) else []
    return _simulate(_scenario(scenario, values), out_path, seed=seed, overwrite=overwrite,
                     protect=protect, noise_free=noise_free)


def read_run(path: PathLike) -> RunFile:
    """Open and validate a run file, read-only; use as a context manager.

    Parameters
    ----------
    path : str or os.PathLike
        The run file (HDF5).

    Returns
    -------
    fringe.io.runreader.RunFile
        ``n_samples``, ``site``, ``apparatus``, ``epoch_utc``; ``read_all()`` and
        ``iter_chunks()`` give the samples (times in s after the epoch, azimuth in rad).
    """
    from fringe.io.runreader import open_run

    return open_run(path)


def fit_record(run_path: PathLike, out: PathLike | None = None, *, theory: str = "sme",
               free: Sequence[str] | None = None, fixed: dict[str, float] | None = None,
               uncertainty: str = "reduced-chi2", drift: str = "linear",
               engine: str = "local", overwrite: bool = False, **options) -> FitResult:
    """Fit a run file: stage 1 (per-turn demodulation) and stages 2-3 (harmonics, coefficients).

    Parameters
    ----------
    run_path : str or os.PathLike
        The run file (HDF5).
    out : str or os.PathLike, optional
        Where to write the fit result (JSON); its per-turn amplitudes go beside it as
        ``<out>.turns.h5``. Both are written whole or not at all; nothing is written if omitted.
    theory : str
        A name of :data:`fringe.theories.THEORIES` ("sme", "rms", "medium", "clock").
    free : sequence of str, optional
        Free coefficients (default: the theory's default set for the record's span).
    fixed : dict, optional
        Coefficients held at given values.
    uncertainty : str
        "reduced-chi2" (default), "bootstrap" or "formal" (``docs/fit.md``).
    drift : str
        Per-turn drift polynomial: "offset", "linear" or "quadratic".
    engine : str
        "local" or "dask" (stage 1 on a dask.distributed cluster: pass ``scheduler=ADDRESS``).
    overwrite : bool
        Replace existing outputs.
    **options
        Further fields of :class:`fringe.fit.FitSettings` (``bootstrap_days``, ``lab_b0``,
        ``lab_c0``, ``regress``) and of :func:`fringe.fit.fit_run` (``scheduler``, ``dut1_s``,
        ``one_stage``, ``scratch_dir``).

    Returns
    -------
    fringe.io.fit_result.FitResult
        ``summary()`` for a person, ``to_dict()`` for the JSON file.
    """
    from dataclasses import fields

    from fringe.demodulate.settings import DemodSettings
    from fringe.errors import ConfigError
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings
    from fringe.io.fit_files import fit_outputs, write_fit_files

    setting_names = {f.name for f in fields(FitSettings)}
    run_names = {"scheduler", "dut1_s", "one_stage", "scratch_dir"}
    unknown = sorted(set(options) - setting_names - run_names)
    if unknown:
        raise ConfigError(f"fit_record: unknown option {unknown[0]!r}; known: "
                          f"{', '.join(sorted((setting_names | run_names) - {'theory'}))}")
    settings = FitSettings(theory=theory, free=tuple(free) if free is not None else None,
                           fixed=dict(fixed or {}), uncertainty=uncertainty,
                           **{k: v for k, v in options.items() if k in setting_names})
    run_options = {k: v for k, v in options.items() if k in run_names}
    if out is None:
        result, columns = fit_run(str(run_path), settings, DemodSettings(drift=drift),
                                  engine=engine, **run_options)
        with columns:                   # the per-turn columns are not kept: release them
            return result
    out = Path(out)
    outputs = fit_outputs(out, overwrite=overwrite, protect=[run_path])  # checked first
    run_options.setdefault("scratch_dir", str(outputs.base.resolve()))
    with outputs:
        result, columns = fit_run(str(run_path), settings, DemodSettings(drift=drift),
                                  engine=engine, **run_options)
        with columns:
            return write_fit_files(outputs, result, columns)


def load_fit(path: PathLike) -> FitResult:
    """Read a fit-result file (JSON, written by :func:`fit_record` or ``fringe fit``).

    Parameters
    ----------
    path : str or os.PathLike
        The fit-result file.

    Returns
    -------
    fringe.io.fit_result.FitResult
        Validated: a malformed file raises :class:`fringe.errors.InputFileError` naming the file
        and the field.
    """
    from fringe.io.fit_result import read_fit_result

    return read_fit_result(path)


def write_report(fit_path: PathLike, out_dir: PathLike, *, compare: PathLike | None = None,
                 overwrite: bool = False, **inputs) -> list[Path]:
    """Write the report of a fit result: report.md, report.tex + numbers.tex, report.html, ...

    The LaTeX pair is a fragment to include in a paper and its macros (docs/report.md, "LaTeX"); the
    figures (PNG and PDF) and summary.json complete the set.

    Parameters
    ----------
    fit_path : str or os.PathLike
        The fit-result file (JSON); the per-turn amplitudes file it names is read too.
    out_dir : str or os.PathLike
        Output directory (created if missing); every file is written whole or not at all.
    compare : str or os.PathLike, optional
        Table of earlier results (CSV or TOML: name, value, sigma, citation).
    overwrite : bool
        Replace existing outputs.
    **inputs
        ``kt=(value, sigma)`` and ``is_=(value, sigma)``: the Kennedy–Thorndike and Ives–Stilwell
        combinations from other experiments, to solve the RMS parameters separately.

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    from fringe.report.build import build_report

    return build_report(fit_path, out_dir, compare=compare, overwrite=overwrite, **inputs)


def forecast(scenario: Scenario | PathLike, *, free: Sequence[str] | None = None,
             targets: dict[str, float] | None = None) -> PlanResult:
    """Forecast the 1σ bounds a scenario's campaign would reach (needs a ``[noise]`` section).

    Parameters
    ----------
    scenario : Scenario or path
        A scenario, or the path of a scenario file.
    free : sequence of str, optional
        Free coefficients (default: the scenario's ``[plan] free``, else the theory's default).
    targets : dict, optional
        Coefficient -> target σ (dimensionless): the answer gives the days to reach each.

    Returns
    -------
    fringe.plan.PlanResult
        σ against campaign days, rotation period and latitude; ``summary()`` prints the tables.
    """
    from fringe.plan.forecast import forecast as _forecast

    return _forecast(_scenario(scenario, {}), free=free, targets=targets)


def run_study(scenario_path: PathLike, *, campaigns: int = 100, seed: int | None = None,
          free: Sequence[str] | None = None, theory: str | None = None,
          mode: str = "coverage", workers: int | None = None, **options) -> dict:
    """Simulate and fit a scenario's campaign many times: pulls, coverage, σ against the forecast.

    Parameters
    ----------
    scenario_path : str or os.PathLike
        A scenario file (TOML) with a ``[noise]`` section.
    campaigns : int
        Campaigns per grid value, each with its own seeds.
    seed : int, optional
        Master seed (default: drawn; it is recorded in the result as ``master_seed``).
    free : sequence of str, optional
        Free coefficients of every fit (default: the theory's usual set).
    theory : str, optional
        Theory of the fits (default: the scenario's).
    mode : str
        "coverage" (pulls against the injected truth), "null" or "scramble" (``docs/study.md``).
    workers : int, optional
        Local worker processes (default: the CPU count; 1 runs in this process).
    **options
        Further fields of :class:`fringe.study.settings.StudySettings` (``inject_sigma``,
        ``vary``, ``engine``, ``scheduler``, ``scheduler_file``, ``scratch_dir``, ``demod``).

    Notes
    -----
    Not called ``study``: that name is the subpackage :mod:`fringe.study`, which replaces the
    attribute of :mod:`fringe` as soon as it is imported.

    Returns
    -------
    dict
        What ``fringe study`` writes as study.json: per coefficient ``pull_mean``, ``pull_std``,
        ``coverage_68``, ``coverage_95`` with their binomial uncertainties, the median σ and the
        forecast σ; and every campaign's seeds and estimates.
    """
    from dataclasses import fields

    from fringe.errors import ConfigError
    from fringe.fit.settings import FitSettings
    from fringe.study.run import run_study as _run_study
    from fringe.study.settings import StudySettings

    known = {f.name for f in fields(StudySettings)} - {"campaigns", "seed", "mode", "workers",
                                                        "fit"}
    unknown = sorted(set(options) - known)
    if unknown:
        raise ConfigError(f"run_study: unknown option {unknown[0]!r}; known: "
                          f"{', '.join(sorted(known))}")
    fit = None
    if free is not None or theory is not None:
        if theory is None:
            from fringe.experiment.scenario import load_scenario

            theory = load_scenario(scenario_path).theory.name
        fit = FitSettings(theory=theory, free=tuple(free) if free is not None else None)
    settings = StudySettings(campaigns=campaigns, seed=seed, fit=fit, mode=mode,
                             workers=workers, **options)
    return _run_study(scenario_path, settings)
