"""``fringe watch FOLDER --out DIR``: follow a folder of run files and update the fit as they come.

No physics here: parse the options, drive :class:`fringe.report.watching.Watch`, print one line
per piece. SIGINT or SIGTERM ends the watch between two writes: every output and the state
stay whole, and a new ``fringe watch`` with the same ``--out`` continues.
"""

from __future__ import annotations

import time

import click

from fringe.cli.common import RegistryChoice, run_guarded


def _names(text: str | None) -> tuple[str, ...] | None:
    if not text:
        return None
    return tuple(n.strip() for n in text.split(",") if n.strip())


def _line(entry: dict) -> str:
    piece = entry["piece"]
    if "samples" in entry:                     # a part of a file followed while written
        a, b = entry["samples"]
        piece += f" [samples {a}-{b - 1}{', still written' if entry['being_written'] else ''}]"
    if "coefficients" not in entry:
        return f"{piece}: {entry['days']:.2f} d so far, no fit yet ({entry['waiting']})"
    best = ", ".join(f"{n} {e['value']:.3g} ± {e['sigma']:.2g}"
                     for n, e in list(entry["coefficients"].items())[:3])
    return f"{piece}: {entry['days']:.2f} d, {best}, ..."


@click.command("watch")
@click.argument("folder")
@click.option("--out", "out_dir", required=True, metavar="DIR",
              help="Directory for fit.json, report/, history.json, history.png and state/.")
@click.option("--theory", type=RegistryChoice("fringe.theories", "THEORIES"), default="sme",
              show_default=True, help="Theory whose coefficients are fitted.")
@click.option("--free", "free", default=None, metavar="NAMES",
              help="Comma-separated free coefficients   [default: the theory's usual set "
                   "for the span so far]")
@click.option("--uncertainty",
              type=RegistryChoice("fringe.fit.incremental", "INCREMENTAL_UNCERTAINTY_MODES"),
              default="reduced-chi2", show_default=True,
              help="How the coefficient uncertainties are scaled.")
@click.option("--bootstrap-days", type=float, default=1.0, show_default=True,
              help="Length of the resampled blocks of turns (with --uncertainty bootstrap).")
@click.option("--regress", multiple=True, metavar="CHANNEL",
              help="Regress out the 2-theta part of an auxiliary channel "
                   "(repeatable)  [default: none]")
@click.option("--no-lab-b0", is_flag=True, help="Do not fit a constant B offset.")
@click.option("--plan", "plan_path", default=None, metavar="SCENARIO",
              help="Scenario with a [noise] section: its forecast sigma goes beside the "
                   "history  [default: none]")
@click.option("--no-report", is_flag=True, help="Do not rewrite the report page.")
@click.option("--once", is_flag=True, help="Process what is there and exit.")
@click.option("--interval", type=click.FloatRange(min=0.0), default=60.0, show_default=True,
              help="Seconds between looks at the folder.")
@click.option("--stop-after", type=click.IntRange(min=1), default=None, metavar="N",
              help="Exit after N new pieces  [default: never]")
@run_guarded
def command(folder, out_dir, theory, free, uncertainty, bootstrap_days, regress, no_lab_b0,
            plan_path, no_report, once, interval, stop_after):
    """Follow FOLDER, where run files arrive, and keep the fit of all of them up to date."""
    from fringe.fit.settings import FitSettings
    from fringe.report.watching import Watch

    settings = FitSettings(theory=theory, free=_names(free), uncertainty=uncertainty,
                           bootstrap_days=bootstrap_days, lab_b0=not no_lab_b0,
                           regress=tuple(regress))
    plan = None
    if plan_path is not None:
        from fringe.experiment.scenario import load_scenario
        from fringe.plan.forecast import forecast

        plan = forecast(load_scenario(plan_path), free=settings.free)
    watch = Watch(folder, out_dir, settings, plan=plan, report=not no_report)
    done, shown = 0, set()
    while True:
        left = None if stop_after is None else stop_after - done
        for entry in watch.poll(limit=left):
            click.echo(_line(entry))
            done += 1
        for name, why in watch.waiting.items():
            click.echo(f"waiting: {name}: {why}", err=True)
        for name in sorted(set(watch.refused) - shown):       # each named once
            click.echo(f"refused: {name}: {watch.refused[name]}", err=True)
            shown.add(name)
        if once or (stop_after is not None and done >= stop_after):
            break
        time.sleep(interval)
    click.echo(f"{done} new piece(s); {len(watch.fit.pieces)} in the fit; outputs in {out_dir}")
