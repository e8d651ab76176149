"""``fringe inspect``: the quality summary of a run file, with two figures."""

from __future__ import annotations

import click

from fringe.cli.common import note_first_compile, run_guarded


@click.command("inspect")
@click.argument("run_file")
@click.option("--out", "out", default=None, help="Directory for the figures and summary.json.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@run_guarded
def command(run_file, out, overwrite):
    """Print the quality summary of RUN_FILE (and write figures with --out)."""
    from fringe.demodulate.quality import inspect_run
    from fringe.io.outputset import OutputSet

    outputs = None
    if out is not None:                  # refuse unwritable outputs before the work
        outputs = OutputSet(out, ["inspect.json", "allan.png", "allan.pdf", "spectrum.png",
                                  "spectrum.pdf"], overwrite=overwrite, protect=[run_file])
    note_first_compile()
    rep = inspect_run(run_file)
    click.echo(rep.summary())
    if outputs is None:
        return
    import matplotlib

    matplotlib.use("Agg")
    from fringe.io.atomic import write_json_atomic
    from fringe.report.figures.quality import inspect_figures
    from fringe.report.figures.style import save_figure_file

    with outputs:
        write_json_atomic(outputs.path("inspect.json"), rep.to_dict())
        for name, fig in inspect_figures(rep):
            for sfx in ("png", "pdf"):
                save_figure_file(fig, outputs.path(f"{name}.{sfx}"))
    for p in outputs.targets:
        click.echo(f"wrote {p}")
