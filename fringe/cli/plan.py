"""``fringe plan``: forecast bounds of a scenario from its noise model (no physics here)."""

from __future__ import annotations

import click

from fringe.cli.common import run_guarded as _run_guarded


@click.command("plan")
@click.argument("scenario")
@click.option("--out", "out", default="fringe-plan", show_default=True,
              help="Directory for plan.json, plan.txt and the figures.")
@click.option("--free", default=None, metavar="NAMES",
              help="Comma-separated free coefficients (default: [plan] free, else the five "
                   "ke_* for the SME), e.g. --free ke_XY,ke_XZ,ko_XY.")
@click.option("--target", "targets", multiple=True, metavar="NAME=VALUE",
              help="Report the days needed for sigma(NAME) <= VALUE, e.g. --target "
                   "ke_XY=1e-18 (repeatable).")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@_run_guarded
def command(scenario, out, free, targets, overwrite):
    """Forecast 1-sigma bounds for SCENARIO (which needs a [noise] section)."""
    from fringe.experiment.scenario import load_scenario, parse_assignments
    from fringe.io.atomic import write_json_atomic, write_text_atomic
    from fringe.io.outputset import OutputSet
    from fringe.plan.forecast import forecast
    from fringe.plan.settings import plan_settings

    sc = load_scenario(scenario)
    settings = plan_settings(sc, free=free, targets=parse_assignments(targets, "--target"))
    protect = [scenario]
    figures = ["plan_sigma_vs_days", "plan_sigma_vs_period"]
    if settings.latitudes_deg:
        figures.append("plan_sigma_vs_latitude")
    names = ["plan.json", "plan.txt"] + [f"{f}.{s}" for f in figures for s in ("png", "pdf")]
    # refuse before computing or writing anything; all outputs appear together
    outputs = OutputSet(out, names, overwrite=overwrite, protect=protect)
    result = forecast(sc, settings=settings)

    import matplotlib

    matplotlib.use("Agg")
    import fringe.report.figures.plan as plan_figures
    from fringe.report.figures.style import save_figure_file

    with outputs:
        write_json_atomic(outputs.path("plan.json"), result.to_dict())
        write_text_atomic(outputs.path("plan.txt"), result.summary() + "\n")
        for name in figures:
            ax = getattr(plan_figures, name.removeprefix("plan_"))(result)
            for suffix in ("png", "pdf"):
                save_figure_file(ax.figure, outputs.path(f"{name}.{suffix}"))

    click.echo(result.summary())
    click.echo("")
    for p in outputs.targets:
        click.echo(f"wrote {p}")
