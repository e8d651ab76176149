"""``fringe demo``: the whole job end to end on the built-in, invented scenario.

The demo's outputs are one set: every step writes into a hidden staging directory beside
``--out`` (:class:`fringe.io.outputset.OutputTree`), and the whole folder moves into place
when the last step has finished, or not at all (a failure or an interrupt removes the staging
directory). The steps run inside the staging directory with the outputs' relative names, so the
files name each other as ``run.h5``, ``fit.json``, ``fit.turns.h5`` (the folder can be moved)
and no staging path is ever recorded.
"""

from __future__ import annotations

import contextlib
import os
import time
from importlib import resources
from pathlib import Path

import click

from fringe.cli.common import progress, run_guarded, step, verbosity_options, warnings_once
from fringe.errors import FringeError, InputFileError

#: The demo's outputs known before it runs (checked at once; the report's figures are added
#: when written), in the order they move into an existing folder: the fit's turns file before
#: the result that records its hash.
DEMO_OUTPUTS = ("scenario.toml", "run.h5", "inspect.txt", "inspect_allan.png",
                "inspect_spectrum.png", "fit.turns.h5", "fit.json", "report/report.md",
                "report/report.tex", "report/numbers.tex", "report/report.html",
                "report/summary.json", "plan.json", "plan.txt")


def demo_scenario_path() -> Path:
    """Path of the bundled demo scenario (``fringe/data/demo.toml``)."""
    return Path(str(resources.files("fringe").joinpath("data/demo.toml")))


@click.command("demo")
@click.option("--out", "out", default="fringe-demo", show_default=True, metavar="DIR",
              help="Directory to write every output of the demo into (created if missing; "
                   "written whole or not at all).")
@click.option("--seed", type=int, default=2027, show_default=True,
              help="Seed of the simulated noise (printed, and recorded in run.h5 as "
                   "settings/seed).")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace the outputs of an earlier demo in --out.")
@verbosity_options
@run_guarded
def command(out, seed, overwrite):
    """Simulate, inspect, fit, report and plan an invented campaign; print where it all is."""
    import matplotlib

    matplotlib.use("Agg")

    from fringe.io.outputset import OutputTree
    from fringe.simulation.campaign import check_seed

    check_seed(seed)                                   # before anything is written
    final = Path(out)
    text = demo_scenario_path().read_text(encoding="utf-8")
    tree = OutputTree(final, DEMO_OUTPUTS, overwrite=overwrite)   # checked before any work
    t0 = time.time()
    with tree, _inside(tree.directory, final):
        _run_steps(text, seed, t0)
    click.echo(f"\ndone in {time.time() - t0:.1f} s. Outputs:")
    for label, name in [("scenario (copy)", "scenario.toml"), ("run file", "run.h5"),
                        ("inspection", "inspect.txt"), ("fit result", "fit.json"),
                        ("per-turn amplitudes", "fit.turns.h5"),
                        ("report (open in a browser)", "report/report.html"),
                        ("report (Markdown / LaTeX)", "report/report.md"),
                        ("forecast", "plan.txt")]:
        click.echo(f"  {label:<28} {final / name}")


@contextlib.contextmanager
def _inside(staging: Path, final: Path):
    """Work in ``staging``; an error naming a staged output names its final path instead."""
    here = os.getcwd()
    os.chdir(staging)
    tops = {n.split("/")[0] for n in DEMO_OUTPUTS}
    try:
        yield
    except FringeError as exc:
        head, sep, rest = str(exc).partition(": ")
        if sep and not os.path.isabs(head) and head.split("/")[0] in tops:
            exc.args = (f"{final / head}: {rest}",)
            if isinstance(exc, InputFileError):
                exc.path = str(final / head)
        raise
    finally:
        os.chdir(here)


def _run_steps(scenario_text: str, seed: int, t0: float) -> None:
    """The demo's five steps, in the working directory, with the outputs' relative names."""
    from fringe.experiment.scenario import load_scenario
    from fringe.io.atomic import write_json_atomic, write_text_atomic
    from fringe.plan.forecast import forecast
    from fringe.report.build import build_report
    from fringe.simulation.campaign import simulate

    write_text_atomic("scenario.toml", scenario_text)
    sc = load_scenario("scenario.toml")
    _heading(f"[1/5] simulate {sc.duration_s / 86400:.0f} days at "
             f"{sc.sample_interval_s:g} s, seed {seed}: {sc.title}")
    with progress(sc.n_samples, "simulate") as bar:
        info = simulate(sc, "run.h5", seed=seed, progress=bar.update)
    _heading(f"      {info['n_samples']} samples, {info['n_gaps']} gaps, "
             f"{info['n_glitches']} glitches ({time.time() - t0:.1f} s)")

    _heading("[2/5] inspect")
    _inspect_step("run.h5")

    from fringe.cli.fit import significance_lines

    _heading(f"[3/5] fit (theory {sc.theory.name}, the scenario's; free ke_*)")
    result = _fit_step("run.h5", "fit.json", sc.theory.name, info["n_samples"])
    click.echo(result.summary())
    for line in significance_lines(result):
        click.echo(line)
    click.echo("      injected: " + ", ".join(f"{k}={v:.3g}" for k, v in sc.coefficients.items()))

    _heading("[4/5] report")
    with step("report: tables, figures and pages"):
        build_report("fit.json", "report")

    _heading("[5/5] plan (forecast for this scenario; days to reach 1e-18 on ke_XY)")
    with step("plan: Fisher forecast"):
        plan = forecast(sc, targets={"ke_XY": 1e-18})
    write_json_atomic("plan.json", plan.to_dict())
    write_text_atomic("plan.txt", plan.summary() + "\n")
    click.echo(plan.summary())


def _heading(line: str) -> None:
    """A step's heading on stdout, unless -q was given (only results, warnings and errors)."""
    from fringe.cli.common import quiet

    if not quiet():
        click.echo(line)


def _inspect_step(run_path: str) -> None:
    """Quality summary, Allan deviation and spectrum figures of the run file."""
    from fringe.demodulate.quality import inspect_run
    from fringe.io.atomic import write_text_atomic
    from fringe.report.figures.quality import inspect_figures
    from fringe.report.figures.style import save_figure_file

    with step("inspect: turns, gaps, Allan deviation, spectrum"):
        rep = inspect_run(run_path)
    write_text_atomic("inspect.txt", rep.summary() + "\n")
    for name, fig in inspect_figures(rep):
        save_figure_file(fig, f"inspect_{name}.png")


def _fit_step(run_path: str, fit_path: str, theory: str, n_samples: int):
    """Fit the run with the default settings of ``theory`` (and the one-stage cross-check)."""
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings
    from fringe.io.fit_files import fit_outputs, write_fit_files

    with fit_outputs(fit_path) as outputs, \
            progress(n_samples, "fit, stage 1 (per-turn demodulation)") as bar:
        with warnings_once() as fitted:
            result, columns = fit_run(run_path, FitSettings(theory=theory), one_stage=True,
                                      scratch_dir=".", progress=bar.update)
            fitted.append(result)
        with columns:
            return write_fit_files(outputs, result, columns)
