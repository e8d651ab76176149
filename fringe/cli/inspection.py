"""``fringe inspect``: the quality summary of a run file, with two figures."""

from __future__ import annotations

import click

from fringe.cli.common import out_dir, run_guarded


@click.command("inspect")
@click.argument("run_file", type=click.Path(dir_okay=False))
@click.option("--out", "out", default=None, help="Directory for the figures and summary.json.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@run_guarded
def command(run_file, out, overwrite):
    """Print the quality summary of RUN_FILE (and write figures with --out)."""
    from fringe.demodulate.quality import inspect_run

    rep = inspect_run(run_file)
    click.echo(rep.summary())
    if out is None:
        return
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from fringe.io.atomic import save_figure_atomic, write_json_atomic
    from fringe.report.figures.quality import allan_plot, spectrum_plot

    d = out_dir(out)
    written = [write_json_atomic(d / "inspect.json", rep.to_dict(), overwrite=overwrite,
                                 protect=[run_file])]
    fig, ax = plt.subplots(figsize=(5.6, 4.0))
    allan_plot(rep.allan.tau_s, rep.allan.adev, turn_period_s=rep.stats["turn_period_s"], ax=ax)
    for sfx in ("png", "pdf"):
        written.append(save_figure_atomic(fig, d / f"allan.{sfx}", overwrite=overwrite,
                                          protect=[run_file]))
    plt.close(fig)
    fig, ax = plt.subplots(figsize=(6.4, 4.0))
    spectrum_plot(rep.spectrum_f_hz, rep.spectrum_amp, rep.lines_hz, ax=ax)
    for sfx in ("png", "pdf"):
        written.append(save_figure_atomic(fig, d / f"spectrum.{sfx}", overwrite=overwrite,
                                          protect=[run_file]))
    plt.close(fig)
    for p in written:
        click.echo(f"wrote {p}")
