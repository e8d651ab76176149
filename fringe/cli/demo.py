"""``fringe demo``: the whole job end to end on the built-in, invented scenario."""

from __future__ import annotations

import time
from importlib import resources
from pathlib import Path

import click

from fringe.cli.common import out_dir, run_guarded, warnings_once


def demo_scenario_path() -> Path:
    """Path of the bundled demo scenario (``fringe/data/demo.toml``)."""
    return Path(str(resources.files("fringe").joinpath("data/demo.toml")))


@click.command("demo")
@click.option("--out", "out", default="fringe-demo", show_default=True,
              help="Directory for every output of the demo.")
@click.option("--seed", type=int, default=2027, show_default=True)
@click.option("--overwrite", is_flag=True, help="Replace the outputs of an earlier demo.")
@run_guarded
def command(out, seed, overwrite):
    """Simulate, inspect, fit, report and plan an invented campaign; print where it all is."""
    import matplotlib

    matplotlib.use("Agg")

    from fringe.experiment.scenario import load_scenario
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings
    from fringe.io.atomic import write_json_atomic, write_text_atomic
    from fringe.io.fit_files import fit_outputs, write_fit_files
    from fringe.simulation.campaign import check_seed, simulate

    check_seed(seed)                                   # before anything is written
    d = out_dir(out)
    src = demo_scenario_path()
    sc = load_scenario(src)
    scenario_copy = write_text_atomic(d / "scenario.toml", src.read_text(encoding="utf-8"),
                                      overwrite=overwrite)
    t0 = time.time()
    click.echo(f"[1/5] simulate {sc.duration_s / 86400:.0f} days at "
               f"{sc.sample_interval_s:g} s: {sc.title}")
    run_path = d / "run.h5"
    info = simulate(sc, run_path, seed=seed, overwrite=overwrite)
    click.echo(f"      {info['n_samples']} samples, {info['n_gaps']} gaps, "
               f"{info['n_glitches']} glitches ({time.time() - t0:.1f} s)")

    click.echo("[2/5] inspect")
    from fringe.demodulate.quality import inspect_run
    from fringe.report.figures.quality import inspect_figures
    from fringe.report.figures.style import save_figure_file

    rep = inspect_run(str(run_path))
    write_text_atomic(d / "inspect.txt", rep.summary() + "\n", overwrite=overwrite)
    for name, fig in inspect_figures(rep):
        save_figure_file(fig, d / f"inspect_{name}.png", overwrite=overwrite)

    click.echo("[3/5] fit (theory sme, free ke_*)")
    fit_path = d / "fit.json"
    with fit_outputs(fit_path, overwrite=overwrite) as outputs:
        with warnings_once() as fitted:
            result, columns = fit_run(str(run_path), FitSettings(), one_stage=True,
                                      scratch_dir=str(d))
            fitted.append(result)
        with columns:
            result = write_fit_files(outputs, result, columns)
    click.echo(result.summary())
    truth = sc.coefficients
    click.echo("      injected: " + ", ".join(f"{k}={v:.3g}" for k, v in truth.items()))

    click.echo("[4/5] report")
    from fringe.report.build import build_report

    report_dir = d / "report"
    report_files = build_report(fit_path, report_dir, overwrite=overwrite)

    click.echo("[5/5] plan (forecast for this scenario; days to reach 1e-18 on ke_XY)")
    from fringe.plan.forecast import forecast

    plan = forecast(sc, targets={"ke_XY": 1e-18})
    write_json_atomic(d / "plan.json", plan.to_dict(), overwrite=overwrite)
    write_text_atomic(d / "plan.txt", plan.summary() + "\n", overwrite=overwrite)
    click.echo(plan.summary())

    click.echo(f"\ndone in {time.time() - t0:.1f} s. Outputs:")
    for label, p in [("scenario (copy)", scenario_copy), ("run file", run_path),
                     ("inspection", d / "inspect.txt"), ("fit result", fit_path),
                     ("per-turn amplitudes", d / "fit.turns.h5"),
                     ("report (open in a browser)", report_dir / "report.html"),
                     ("report (Markdown / LaTeX)", report_dir / "report.md"),
                     ("forecast", d / "plan.txt")]:
        click.echo(f"  {label:<28} {p}")
    del report_files
