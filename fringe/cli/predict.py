"""``fringe predict``: the signal, signal map and harmonic table of hypothetical coefficients."""

from __future__ import annotations

from pathlib import Path

import click

from fringe.cli.common import out_dir as _out_dir
from fringe.cli.common import progress, run_guarded
from fringe.version import __version__


@click.command("predict")
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option("--set", "assignments", multiple=True, metavar="NAME=VALUE",
              help="Hypothetical coefficient value, e.g. --set ke_XY=1e-17 (repeatable).")
@click.option("--out", "out_dir", default="fringe-prediction", show_default=True,
              help="Directory for the outputs.")
@click.option("--series/--no-series", default=True, show_default=True,
              help="Write the noise-free time series of the campaign as a run file.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@run_guarded
def command(scenario, assignments, out_dir, series, overwrite):
    """Signal, signal map and harmonic table of hypothetical coefficients for SCENARIO."""
    from fringe.experiment.prediction import iter_prediction_chunks, predict
    from fringe.experiment.scenario import load_scenario, parse_assignments
    from fringe.io.atomic import save_figure_atomic, write_json_atomic, write_text_atomic

    sc = load_scenario(scenario)
    if assignments:
        sc = sc.with_coefficients(parse_assignments(assignments, "--set"))
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

        with progress(sc.n_samples, "time series") as bar, \
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
