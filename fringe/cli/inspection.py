"""``fringe inspect``: the quality summary of a run file, with two figures."""

from __future__ import annotations

import click

from fringe.cli.common import note_first_compile, run_guarded, step, verbosity_options

#: What ``fringe inspect --out DIR`` writes into DIR.
OUTPUTS = ("inspect.txt", "inspect.json", "allan.png", "allan.pdf", "spectrum.png",
           "spectrum.pdf")


@click.command("inspect")
@click.argument("run_file")
@click.option("--out", "out", default=None, metavar="DIR",
              help="Directory to write inspect.txt (the printed summary), inspect.json, "
                   "allan.png/.pdf and spectrum.png/.pdf into (created if missing)  [default: "
                   "print the summary only, write nothing]")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace the files of an earlier inspect in --out.")
@verbosity_options
@run_guarded
def command(run_file, out, overwrite):
    """Print the quality summary of RUN_FILE (and write figures with --out)."""
    from fringe.demodulate.quality import inspect_run
    from fringe.io.outputset import OutputSet

    outputs = None
    if out is not None:                  # refuse unwritable outputs before the work
        outputs = OutputSet(out, list(OUTPUTS), overwrite=overwrite, protect=[run_file])
    note_first_compile()
    with step("inspect: turns, gaps, Allan deviation, spectrum"):
        rep = inspect_run(run_file)
    click.echo(rep.summary())
    if outputs is None:
        return
    import matplotlib

    matplotlib.use("Agg")
    from fringe.io.atomic import write_json_atomic, write_text_atomic
    from fringe.report.figures.quality import inspect_figures
    from fringe.report.figures.style import save_figure_file

    with outputs:
        write_text_atomic(outputs.path("inspect.txt"), rep.summary() + "\n")
        write_json_atomic(outputs.path("inspect.json"), rep.to_dict())
        for name, fig in inspect_figures(rep):
            for sfx in ("png", "pdf"):
                save_figure_file(fig, outputs.path(f"{name}.{sfx}"))
    for p in outputs.targets:
        click.echo(f"wrote {p}")
