"""``fringe predict``: the signal, signal map and harmonic table of hypothetical coefficients."""

from __future__ import annotations

from pathlib import Path

import click

from fringe.cli.common import progress, run_guarded, verbosity_options
from fringe.version import __version__


@click.command("predict")
@click.argument("scenario")
@click.option("--set", "assignments", multiple=True, metavar="NAME=VALUE",
              help="Hypothetical coefficient value (dimensionless), e.g. --set ke_XY=1e-17 "
                   "(repeatable)  [default: the scenario's [coefficients]]")
@click.option("--out", "out_dir", default="fringe-prediction", show_default=True,
              metavar="DIR",
              help="Directory to write harmonics.json, harmonics.txt, signal_map.png/.pdf and "
                   "prediction.h5 into (created if missing).")
@click.option("--series/--no-series", default=True, show_default=True,
              help="Write the noise-free time series of the campaign as a run file "
                   "(prediction.h5).")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace the files of an earlier prediction in --out.")
@verbosity_options
@run_guarded
def command(scenario, assignments, out_dir, series, overwrite):
    """Signal, signal map and harmonic table of hypothetical coefficients for SCENARIO."""
    from fringe.experiment.prediction import predict
    from fringe.experiment.scenario import load_scenario, parse_assignments
    from fringe.io.atomic import write_json_atomic, write_text_atomic
    from fringe.io.outputset import OutputSet

    sc = load_scenario(scenario)
    if assignments:
        sc = sc.with_coefficients(parse_assignments(assignments, "--set"))
    protect = [scenario]
    names = ["harmonics.json", "harmonics.txt", "signal_map.png", "signal_map.pdf"]
    names += ["prediction.h5"] if series else []
    # refuse before computing or writing anything; all outputs appear together
    outputs = OutputSet(out_dir, names, overwrite=overwrite, protect=protect)
    result = predict(sc)

    import matplotlib

    matplotlib.use("Agg")
    from fringe.report.figures.prediction import prediction_figure
    from fringe.report.figures.style import save_figure_file

    with outputs:
        write_json_atomic(outputs.path("harmonics.json"), result.to_dict())
        write_text_atomic(outputs.path("harmonics.txt"), result.summary() + "\n")
        fig = prediction_figure(result, coefficients=sc.coefficients,
                                title=f"{sc.title or Path(scenario).name}\n"
                                      f"signal at {result.table.t_ref_utc}")
        for suffix in ("png", "pdf"):
            save_figure_file(fig, outputs.path(f"signal_map.{suffix}"))
        if series:
            _write_series(sc, scenario, outputs.path("prediction.h5"))

    click.echo(result.summary())
    click.echo("")
    for p in outputs.targets:
        click.echo(f"wrote {p}")


def _write_series(sc, scenario, path) -> None:
    """The noise-free time series of the campaign as a run file at ``path``."""
    from fringe.experiment.prediction import iter_prediction_chunks
    from fringe.io.runwriter import RunWriter

    with progress(sc.n_samples, "time series") as bar, \
            RunWriter(path, site=sc.site, apparatus=sc.apparatus.attributes(),
                      epoch_utc=sc.epoch.utc, signal_units=sc.units, azimuth_units="rad") \
            as writer:
        writer.write_group("provenance", {"created_by": f"fringe {__version__} predict",
                                          "scenario": str(scenario)})
        for t, az, s in iter_prediction_chunks(sc):
            writer.append(t, az, s)
            bar.update(t.size)
