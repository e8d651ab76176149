"""The ``fringe`` command line: parse options, call the library, print, exit.

No physics lives here. A :class:`~fringe.errors.FringeError` becomes its one-line message on
stderr and a non-zero exit, with no traceback.
"""

from __future__ import annotations

import logging
from pathlib import Path

import click

from fringe.cli.common import out_dir as _out_dir
from fringe.cli.common import progress as _progress
from fringe.cli.common import run_guarded as _run_guarded
from fringe.version import __version__


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="fringe")
@click.option("-v", "--verbose", count=True, help="More log output (repeat for debug).")
def main(verbose: int):
    """fringe: design, fit and publish rotating-apparatus tests of light-speed isotropy."""
    level = logging.WARNING - 10 * min(verbose, 2)
    logging.basicConfig(level=level, format="%(levelname)s %(name)s: %(message)s")


@main.command("predict")
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option("--set", "assignments", multiple=True, metavar="NAME=VALUE",
              help="Hypothetical coefficient value, e.g. --set ke_XY=1e-17 (repeatable).")
@click.option("--out", "out_dir", default="fringe-prediction", show_default=True,
              help="Directory for the outputs.")
@click.option("--series/--no-series", default=True, show_default=True,
              help="Write the noise-free time series of the campaign as a run file.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@_run_guarded
def predict_cmd(scenario, assignments, out_dir, series, overwrite):
    """Signal, signal map and harmonic table of hypothetical coefficients for SCENARIO."""
    from fringe.experiment.prediction import iter_prediction_chunks, predict
    from fringe.experiment.scenario import load_scenario, parse_assignments
    from fringe.io.atomic import save_figure_atomic, write_json_atomic, write_text_atomic

    sc = load_scenario(scenario)
    if assignments:
        sc = sc.with_coefficients(parse_assignments(assignments))
    result = predict(sc)
    out = _out_dir(out_dir)
    protect = [scenario]
    written = [write_json_atomic(out / "harmonics.json", result.to_dict(), overwrite=overwrite,
                                 protect=protect),
               write_text_atomic(out / "harmonics.txt", result.summary() + "\n",
                                 overwrite=overwrite, protect=protect)]

    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from fringe.report.figures.prediction import harmonic_bars, signal_map

    fig, axes = plt.subplots(1, 2, figsize=(12, 4.6), gridspec_kw={"width_ratios": [1.1, 1]})
    signal_map(result.map_azimuth_deg, result.map_phi_deg, result.map_signal,
               units=result.units, ax=axes[0],
               title=f"{sc.title or Path(scenario).name}: signal at {result.table.t_ref_utc}")
    contrib = {k: v for k, v in result.table.contribution().items()
               if k == "total" or sc.coefficients.get(k)}
    if contrib:
        harmonic_bars(contrib, units=result.units, ax=axes[1])
    axes[1].set_title("C10 harmonics (contribution of each coefficient)", fontsize=10)
    fig.tight_layout()
    for suffix in ("png", "pdf"):
        written.append(save_figure_atomic(fig, out / f"signal_map.{suffix}",
                                          overwrite=overwrite, protect=protect))
    plt.close(fig)

    if series:
        from fringe.io.runwriter import RunWriter

        with _progress(sc.n_samples, "time series") as bar, \
                RunWriter(out / "prediction.h5", site=sc.site,
                          apparatus=sc.apparatus.attributes(), epoch_utc=sc.epoch.utc,
                          signal_units=sc.units, azimuth_units="rad", overwrite=overwrite,
                          protect=protect) as writer:
            writer.write_group("provenance", {"created_by": f"fringe {__version__} predict",
                                              "scenario": str(scenario)})
            for t, az, s in iter_prediction_chunks(sc):
                writer.append(t, az, s)
                bar.update(t.size)
        written.append(out / "prediction.h5")

    click.echo(result.summary())
    click.echo("")
    for p in written:
        click.echo(f"wrote {p}")


def _register_optional_commands():
    """Add the commands defined in their own modules (``fringe/cli/<name>.py``)."""
    import importlib

    for name in ("simulate", "inspection", "import_csv", "fit", "report", "plan", "demo"):
        module = importlib.import_module(f"{__name__}.{name}")
        main.add_command(module.command)


_register_optional_commands()


if __name__ == "__main__":  # pragma: no cover
    main()
