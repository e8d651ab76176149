"""``fringe study``: many simulated campaigns of a scenario, fitted, reduced to coverage tables."""

from __future__ import annotations

import shutil
import sys
import warnings

import click

from fringe.cli.common import RegistryChoice, run_guarded

#: The outputs, in the order they are moved into place (study.json, which the page describes,
#: last).
FIGURES = ("study_pulls", "study_coverage", "study_sigma")


def _names(text):
    return tuple(n.strip() for n in text.split(",") if n.strip()) if text else None


def _fit_settings(scenario, theory, free, fixes, uncertainty, bootstrap_days, no_lab_b0,
                  lab_c0):
    from fringe.experiment.scenario import load_scenario, parse_assignments
    from fringe.fit.settings import FitSettings

    name = theory or load_scenario(scenario).theory.name
    return FitSettings(theory=name, free=_names(free), fixed=parse_assignments(fixes, "--fix"),
                       uncertainty=uncertainty, bootstrap_days=bootstrap_days,
                       lab_b0=not no_lab_b0, lab_c0=lab_c0)


class _Bar:
    """A progress bar of campaigns on a terminal (nothing elsewhere)."""

    def __init__(self, total: int):
        self.bar = click.progressbar(length=total, label="campaigns", file=sys.stderr) \
            if sys.stderr.isatty() else None

    def __enter__(self):
        if self.bar is not None:
            self.bar.__enter__()
        return self

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)

    def __call__(self, done: int, total: int) -> None:
        if self.bar is not None:
            self.bar.update(1)


def _write(outputs, study):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    import fringe.report.figures.study as figs
    from fringe.io.atomic import save_figure_atomic, write_json_atomic, write_text_atomic
    from fringe.report.study_page import study_html, study_markdown

    pngs = [f"{f}.png" for f in FIGURES]
    for name, draw in zip(pngs, (figs.pull_histograms, figs.coverage, figs.sigma_vs_forecast)):
        draw(study)
        fig = plt.gcf()
        fig.tight_layout()
        save_figure_atomic(fig, outputs.path(name))
        plt.close(fig)
    write_text_atomic(outputs.path("study.md"), study_markdown(study, pngs))
    write_text_atomic(outputs.path("study.html"), study_html(study, pngs))
    write_json_atomic(outputs.path("study.json"), study)


@click.command("study")
@click.argument("scenario")
@click.option("--campaigns", type=int, default=100, show_default=True,
              help="Campaigns per grid value, each with its own seeds.")
@click.option("--out", "out", default="fringe-study", show_default=True, metavar="DIR",
              help="Directory for study.json, study.md, study.html and the figures.")
@click.option("--seed", type=click.IntRange(0), default=None,
              help="Master seed  [default: drawn, and recorded in study.json]")
@click.option("--mode", type=RegistryChoice("fringe.study.settings", "STUDY_MODES"),
              default="coverage", show_default=True,
              help="coverage: pulls against the truth; null: nothing injected; scramble: "
                   "whole turns permuted in time before the fit.")
@click.option("--inject-sigma", type=float, default=None, metavar="K",
              help="Draw each free coefficient from N(0, (K x forecast sigma)^2) per campaign  "
                   "[default: none injected]")
@click.option("--vary", default=None, metavar="FIELD=V1,V2,...",
              help="One scenario field over a grid: period_s, latitude_deg or duration_days  "
                   "[default: none]")
@click.option("--theory", type=RegistryChoice("fringe.theories", "THEORIES"), default=None,
              help="Theory of the fit  [default: the scenario's]")
@click.option("--free", default=None, metavar="NAMES",
              help="Comma-separated free coefficients  [default: the theory's usual set]")
@click.option("--fix", "fixes", multiple=True, metavar="NAME=VALUE",
              help="Hold a coefficient at a value in every fit (dimensionless; "
                   "repeatable)  [default: none]")
@click.option("--uncertainty", type=RegistryChoice("fringe.fit.settings", "UNCERTAINTY_MODES"),
              default="reduced-chi2", show_default=True,
              help="How the coefficient uncertainties are scaled.")
@click.option("--bootstrap-days", type=float, default=1.0, show_default=True,
              help="Block length of the bootstrap, days (with --uncertainty bootstrap).")
@click.option("--drift", type=RegistryChoice("fringe.demodulate.settings", "DRIFT_TERMS"),
              default="linear", show_default=True, help="Per-turn drift polynomial.")
@click.option("--max-harmonic", type=click.IntRange(2, 4), default=2, show_default=True,
              help="Highest harmonic of the rotation angle fitted per turn.")
@click.option("--min-samples", type=click.IntRange(3), default=12, show_default=True,
              help="Fewest samples a turn needs to be fitted.")
@click.option("--no-lab-b0", is_flag=True, help="Do not fit a constant B offset.")
@click.option("--lab-c0", is_flag=True, help="Fit a constant C offset (needs ke_ZZ fixed).")
@click.option("--engine", type=RegistryChoice("fringe.study.settings", "STUDY_ENGINES"),
              default="local", show_default=True,
              help="local: this machine (--workers processes); dask: one task per campaign  "
                   "[default: none injected]")
@click.option("--workers", type=click.IntRange(1), default=None,
              help="Local processes  [default: the CPU count]")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="dask scheduler address (with --engine dask)  [default: a local cluster]")
@click.option("--scheduler-file", default=None, metavar="FILE",
              help="dask scheduler file (with --engine dask, instead of "
                   "--scheduler)  [default: none]")
@click.option("--scratch-dir", default=None, metavar="DIR",
              help="Where the campaigns' temporary run files live   [default: a hidden "
                   "folder beside the outputs, removed; on dask workers their temporary "
                   "directory]")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@run_guarded
def command(scenario, campaigns, out, seed, mode, inject_sigma, vary, theory, free, fixes,
            uncertainty, bootstrap_days, drift, max_harmonic, min_samples, no_lab_b0, lab_c0,
            engine, workers, scheduler, scheduler_file, scratch_dir, overwrite):
    """Simulate and fit SCENARIO many times: pulls, coverage, sigma against the forecast."""
    from fringe.demodulate.settings import DemodSettings
    from fringe.errors import CampaignWarning
    from fringe.io.atomic import check_directory_writable, temp_name
    from fringe.io.outputset import OutputSet
    from fringe.study.run import run_study
    from fringe.study.settings import StudySettings, parse_vary

    names = [f"{f}.png" for f in FIGURES] + ["study.md", "study.html", "study.json"]
    outputs = OutputSet(out, names, overwrite=overwrite, protect=[scenario])
    if scratch_dir is not None:
        check_directory_writable(scratch_dir, shown=f"--scratch-dir {scratch_dir}")
    fit = _fit_settings(scenario, theory, free, fixes, uncertainty, bootstrap_days, no_lab_b0,
                        lab_c0)
    demod = DemodSettings(drift=drift, max_harmonic=max_harmonic, min_samples=min_samples)
    own_scratch = None
    if scratch_dir is None and engine == "local":
        # a name the next command in this directory sweeps if this one is killed
        own_scratch = outputs.base / temp_name("study", "scratch")
        own_scratch.mkdir()
    try:
        settings = StudySettings(campaigns=campaigns, seed=seed, fit=fit, demod=demod,
                                 mode=mode, inject_sigma=inject_sigma,
                                 vary=parse_vary(vary, "--vary"), engine=engine,
                                 workers=workers, scheduler=scheduler,
                                 scheduler_file=scheduler_file,
                                 scratch_dir=scratch_dir if own_scratch is None
                                 else str(own_scratch))
        n_rows = len(settings.vary[1]) if settings.vary else 1
        with outputs, _Bar(campaigns * n_rows) as bar:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", CampaignWarning)
                study = run_study(scenario, settings, progress=bar)
            for w in caught:
                if issubclass(w.category, CampaignWarning):
                    click.echo(f"warning: {w.message}", err=True)
                else:
                    warnings.showwarning(w.message, w.category, w.filename, w.lineno)
            _write(outputs, study)
    finally:
        if own_scratch is not None:
            shutil.rmtree(own_scratch, ignore_errors=True)
    from fringe.report.study_page import study_tables

    for title, header, cells in study_tables(study):
        click.echo(title)
        click.echo("  ".join(header[:6]))
        for c in cells:
            click.echo("  ".join(c[:6]))
    click.echo(f"master seed {study['master_seed']}; {study['wall_s'] / 60:.1f} min")
    for p in outputs.targets:
        click.echo(f"wrote {p}")
