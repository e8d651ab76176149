"""``fringe plan``: forecast bounds of a scenario from its noise model (no physics here)."""

from __future__ import annotations

import click

from fringe.cli.common import progress, step, verbosity_options
from fringe.cli.common import run_guarded as _run_guarded


@click.command("plan")
@click.argument("scenario")
@click.option("--out", "out", default="fringe-plan", show_default=True, metavar="DIR",
              help="Directory to write plan.json, plan.txt and the figures (.png, .pdf) into "
                   "(created if missing).")
@click.option("--free", default=None, metavar="NAMES",
              help="Comma-separated free coefficients, e.g. --free ke_XY,ke_XZ,ko_XY  "
                   "[default: the scenario's [plan] free, else the theory's usual set (the "
                   "five ke_* for the SME)]")
@click.option("--target", "targets", multiple=True, metavar="NAME=VALUE",
              help="Report the days needed for sigma(NAME) <= VALUE (VALUE dimensionless, as "
                   "the coefficient), e.g. --target ke_XY=1e-18 (repeatable)  [default: the "
                   "scenario's [plan] targets]")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace the files of an earlier plan in --out.")
@click.option("--monte-carlo", "n_campaigns", type=click.IntRange(2), default=None,
              metavar="N",
              help="Also check the forecast by fitting N simulated campaigns of per-turn "
                   "amplitudes; writes plan_check.json  [default: no check]")
@click.option("--seed", type=int, default=None, metavar="INTEGER",
              help="Seed of the --monte-carlo campaigns (same seed, same check)  [default: "
                   "drawn at random, printed and recorded in plan_check.json]")
@verbosity_options
@_run_guarded
def command(scenario, out, free, targets, overwrite, n_campaigns, seed):
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
    drawn = n_campaigns is not None and seed is None
    if n_campaigns is not None:
        names.append("plan_check.json")
        if drawn:
            from fringe.cli.simulate import draw_seed

            seed = draw_seed()
        from fringe.simulation.campaign import check_seed

        check_seed(seed)
    # refuse before computing or writing anything; all outputs appear together
    outputs = OutputSet(out, names, overwrite=overwrite, protect=protect)
    with step("plan: Fisher forecast over campaign length and rotation period"):
        result = forecast(sc, settings=settings)
    check = None
    if n_campaigns is not None:
        import numpy as np

        from fringe.plan.montecarlo import monte_carlo_check

        with progress(n_campaigns, "plan, Monte Carlo check", min_total=0) as bar:
            check = monte_carlo_check(sc, n_campaigns, np.random.default_rng(seed),
                                      settings=settings, progress=bar.update)

    import matplotlib

    matplotlib.use("Agg")
    import fringe.report.figures.plan as plan_figures
    from fringe.report.figures.style import save_figure_file

    with outputs:
        write_json_atomic(outputs.path("plan.json"), result.to_dict())
        write_text_atomic(outputs.path("plan.txt"), result.summary() + "\n")
        if check is not None:
            write_json_atomic(outputs.path("plan_check.json"),
                              {"seed": int(seed), "check": check.to_dict()})
        for name in figures:
            ax = getattr(plan_figures, name.removeprefix("plan_"))(result)
            for suffix in ("png", "pdf"):
                save_figure_file(ax.figure, outputs.path(f"{name}.{suffix}"))

    click.echo(result.summary())
    if check is not None:
        how = " (drawn at random; pass --seed to repeat it)" if drawn else ""
        click.echo("\n" + check.summary() + f"\n  seed {seed}{how}")
    click.echo("")
    for p in outputs.targets:
        click.echo(f"wrote {p}")
